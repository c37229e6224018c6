"""Closed-loop load generation on loopback: wrk (Debian's package) with a Lua body script, or
an asyncio httpx client when wrk is not installed.

Each run keeps ``concurrency`` connections busy for ``seconds`` with the same POST body and
returns latency percentiles, throughput, errors and the generator's own CPU use (as a
fraction of one core), so a reader can see whether the generator was the bottleneck.
"""

from __future__ import annotations

import asyncio
import json
import resource
import shutil
import statistics
import subprocess
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import httpx

_LUA = r"""
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
local f = assert(io.open(os.getenv("BENCH_BODY"), "rb"))
wrk.body = f:read("*a")
f:close()

done = function(summary, latency, requests)
  local e = summary.errors
  io.write(string.format(
    '\nBENCH {"requests":%d,"duration_us":%d,"socket_errors":%d,"status_errors":%d,' ..
    '"timeouts":%d,"p50_us":%d,"p95_us":%d,"p99_us":%d,"max_us":%d,"mean_us":%.1f}\n',
    summary.requests, summary.duration, e.connect + e.read + e.write, e.status, e.timeout,
    latency:percentile(50), latency:percentile(95), latency:percentile(99), latency.max,
    latency.mean))
end
"""


@dataclass(frozen=True, slots=True)
class RunResult:
    requests: int
    seconds: float
    errors: int  # non-2xx answers + socket errors + timeouts
    p50_ms: float
    p95_ms: float
    p99_ms: float
    max_ms: float
    throughput_rps: float
    generator_cpu: float  # generator CPU seconds / wall seconds (1.0 = one full core)
    generator: str

    def as_dict(self) -> dict[str, float | int | str]:
        return asdict(self)


def have_wrk() -> bool:
    return shutil.which("wrk") is not None


def _children_cpu() -> float:
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def run_wrk(url: str, body_path: Path, concurrency: int, seconds: float) -> RunResult:
    script = body_path.with_suffix(".lua")
    script.write_text(_LUA, encoding="utf-8")
    argv = [
        shutil.which("wrk") or "wrk",
        "-t1",
        f"-c{concurrency}",
        f"-d{max(1, round(seconds))}s",
        "--timeout",
        "30s",
        "-s",
        str(script),
        url,
    ]
    cpu0, t0 = _children_cpu(), time.perf_counter()
    out = subprocess.run(
        argv, capture_output=True, text=True, env={"BENCH_BODY": str(body_path)}, check=False
    )
    wall, cpu = time.perf_counter() - t0, _children_cpu() - cpu0
    line = next((ln for ln in out.stdout.splitlines() if ln.startswith("BENCH ")), None)
    if line is None:
        raise RuntimeError(f"wrk gave no summary: {out.stdout}\n{out.stderr}")
    d = json.loads(line[6:])
    duration = d["duration_us"] / 1e6
    errors = d["socket_errors"] + d["status_errors"] + d["timeouts"]
    return RunResult(
        requests=d["requests"],
        seconds=round(duration, 3),
        errors=errors,
        p50_ms=d["p50_us"] / 1000,
        p95_ms=d["p95_us"] / 1000,
        p99_ms=d["p99_us"] / 1000,
        max_ms=d["max_us"] / 1000,
        throughput_rps=round(d["requests"] / duration, 1) if duration else 0.0,
        generator_cpu=round(cpu / wall, 3),
        generator="wrk",
    )


async def _httpx_run(
    url: str, body: bytes, concurrency: int, seconds: float
) -> tuple[list[float], int, float]:
    latencies: list[float] = []
    errors = 0
    limits = httpx.Limits(max_connections=concurrency, max_keepalive_connections=concurrency)
    headers = {"Content-Type": "application/json"}
    async with httpx.AsyncClient(limits=limits, timeout=30.0) as client:
        start = time.perf_counter()
        stop_at = start + seconds

        async def worker() -> None:
            nonlocal errors
            while time.perf_counter() < stop_at:
                t0 = time.perf_counter()
                try:
                    r = await client.post(url, content=body, headers=headers)
                    ok = 200 <= r.status_code < 300
                except httpx.HTTPError:
                    ok = False
                latencies.append(time.perf_counter() - t0)
                errors += 0 if ok else 1

        await asyncio.gather(*(worker() for _ in range(concurrency)))
        return latencies, errors, time.perf_counter() - start


def run_httpx(url: str, body_path: Path, concurrency: int, seconds: float) -> RunResult:
    body = body_path.read_bytes()
    cpu0 = time.process_time()
    latencies, errors, wall = asyncio.run(_httpx_run(url, body, concurrency, seconds))
    cpu = time.process_time() - cpu0
    return summarize(latencies, errors, wall, cpu / wall if wall else 0.0, "httpx")


def summarize(
    latencies: list[float], errors: int, wall: float, generator_cpu: float, generator: str
) -> RunResult:
    ms = sorted(x * 1000 for x in latencies) or [0.0]

    def pct(p: float) -> float:
        return round(ms[min(len(ms) - 1, int(p / 100 * len(ms)))], 3)

    return RunResult(
        requests=len(latencies),
        seconds=round(wall, 3),
        errors=errors,
        p50_ms=round(statistics.median(ms), 3),
        p95_ms=pct(95),
        p99_ms=pct(99),
        max_ms=round(ms[-1], 3),
        throughput_rps=round(len(latencies) / wall, 1) if wall else 0.0,
        generator_cpu=round(generator_cpu, 3),
        generator=generator,
    )


def run(url: str, body_path: Path, concurrency: int, seconds: float, *, use_wrk: bool) -> RunResult:
    if use_wrk:
        return run_wrk(url, body_path, concurrency, seconds)
    return run_httpx(url, body_path, concurrency, seconds)
