"""``/healthz`` latency while one large hook call is evaluated (issue 14, defect 2).

Starts ``tonicity serve`` (auth off, SQLite in a temporary folder, ``server.max_body_bytes``
raised for the large body), probes ``/healthz`` every ``--interval`` seconds while idle (the
baseline of the same run), then while one patient-view call with ``--observations`` results
runs, then again while ``--concurrent`` such calls run at once (beyond
``server.max_large_calls`` they are refused with 503). Prints one JSON document.

    python -m benchmarks.healthz_during_call [--observations 100000] [--code-root DIR]

``--code-root`` serves another checkout's code (for example the commit before the evaluation
pool) with the same generator, request and probes.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import tempfile
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx

from benchmarks import requests as reqs
from benchmarks._servers import Server, free_port, tonicity_argv, write_config


def _probe_while(base: str, running: threading.Event | None, seconds: float, interval: float):
    """Latencies (ms) of /healthz probes on one kept-alive connection, until ``running`` clears
    (or for ``seconds`` when idle)."""
    out: list[float] = []
    end = time.monotonic() + seconds
    with httpx.Client(timeout=120) as client:  # one connection: the server's time, not ours
        while (running.is_set() if running is not None else time.monotonic() < end) or not out:
            started = time.perf_counter()
            r = client.get(f"{base}/healthz")
            out.append((time.perf_counter() - started) * 1000)
            assert r.status_code == 200, r.status_code
            time.sleep(interval)
    return out


def _summary(ms: list[float]) -> dict[str, Any]:
    ordered = sorted(ms)
    return {
        "probes": len(ms),
        "p50_ms": round(statistics.median(ordered), 1),
        "p95_ms": round(ordered[min(len(ordered) - 1, int(0.95 * len(ordered)))], 1),
        "max_ms": round(ordered[-1], 1),
    }


def _during(base: str, body: bytes, calls: int, interval: float) -> dict[str, Any]:
    running = threading.Event()
    running.set()
    results: list[tuple[int, float]] = []

    def one() -> None:
        started = time.perf_counter()
        r = httpx.post(
            f"{base}/cds-services/sodium-workup",
            content=body,
            headers={"Content-Type": "application/json"},
            timeout=600,
        )
        results.append((r.status_code, time.perf_counter() - started))

    with ThreadPoolExecutor(calls) as pool:
        futures = [pool.submit(one) for _ in range(calls)]
        time.sleep(0.05)  # the calls are sent; the probes run on this thread

        def done_watch() -> None:
            for f in futures:
                f.result()
            running.clear()

        watcher = threading.Thread(target=done_watch)
        watcher.start()
        probes = _probe_while(base, running, 0, interval)
        watcher.join()
    return {
        "calls": calls,
        "statuses": sorted(s for s, _ in results),
        "call_seconds": sorted(round(t, 2) for _, t in results),
        "healthz": _summary(probes),
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--observations", type=int, default=100_000)
    ap.add_argument("--interval", type=float, default=0.05, help="seconds between probes")
    ap.add_argument("--idle-seconds", type=float, default=3.0)
    ap.add_argument("--concurrent", type=int, default=3, help="large calls at once, last phase")
    ap.add_argument("--port", type=int, default=None, help="default: a free loopback port")
    ap.add_argument("--code-root", type=Path, default=None, help="serve this checkout's code")
    args = ap.parse_args(argv)

    body = json.dumps(reqs.patient_view_request(args.observations)).encode()
    with tempfile.TemporaryDirectory(prefix="tonicity-healthz-") as tmp:
        folder = Path(tmp)
        port = args.port or free_port()
        config = write_config(folder, storage_url=f"sqlite:///{folder / 'bench.db'}", port=port)
        text = config.read_text(encoding="utf-8").replace(
            "[storage]", f"max_body_bytes = {len(body) + 1_000_000}\n\n[storage]"
        )
        config.write_text(text, encoding="utf-8")
        root = args.code_root.resolve() if args.code_root else None
        server = Server("tonicity", tonicity_argv(config, port), port, folder, cwd=root)
        with server as s:
            base = s.base_url
            idle = _summary(_probe_while(base, None, args.idle_seconds, args.interval))
            one = _during(base, body, 1, args.interval)
            many = _during(base, body, args.concurrent, args.interval)
    print(
        json.dumps(
            {
                "benchmark": "healthz_during_call",
                "date": datetime.now(UTC).isoformat(timespec="seconds"),
                "command": " ".join(["python -m benchmarks.healthz_during_call", *sys.argv[1:]]),
                "machine": {"cpus": os.cpu_count(), "python": platform.python_version()},
                "code_root": str(args.code_root) if args.code_root else "this checkout",
                "observations": args.observations,
                "body_bytes": len(body),
                "idle": idle,
                "one_large_call": one,
                "concurrent_large_calls": many,
                "ratio_max_during_one_vs_idle_p50": round(
                    one["healthz"]["max_ms"] / max(idle["p50_ms"], 0.1), 1
                ),
            },
            indent=2,
        )
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
