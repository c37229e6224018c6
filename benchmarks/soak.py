"""Soak: many hook calls through the whole app in one process, resident memory sampled.

The app (auth off, SQLite card log in a temporary folder) is driven in-process over ASGI by a
few concurrent tasks with a repeating mix: patient-view, order-select and order-sign with
realistic prefetch, feedback on the cards returned, and a wrong-hook request (the 400 path,
where leaks like to hide). VmRSS of this process is sampled as the calls go; the report gives
the growth after warm-up and the growth per 10,000 calls over the second half (a leak shows as
a steady slope; caches and the allocator settle early). Goal: bounded (the second-half slope
under 2 MiB per 10,000 calls).

    python -m benchmarks.soak                   # 100,000 calls (hours on a busy 2-core box)
    python -m benchmarks.soak --calls 5000      # the run quoted in EVIDENCE.md
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path
from typing import Any

import httpx

from benchmarks import _servers
from benchmarks import requests as rq

GOAL_SLOPE_MIB_PER_10K = 2.0


def _mix(n_obs: int) -> list[tuple[str, bytes]]:
    pv = json.dumps(rq.hook_request("patient-view", n_obs)).encode()
    sel = json.dumps(rq.hook_request("order-select", n_obs)).encode()
    sign = json.dumps(rq.hook_request("order-sign", n_obs)).encode()
    wrong = json.dumps({**rq.hook_request("order-sign", 20), "hook": "patient-view"}).encode()
    return [
        ("/cds-services/sodium-workup", pv),
        ("/cds-services/sodium-order-select", sel),
        ("/cds-services/sodium-workup", pv),
        ("/cds-services/sodium-order-sign", sign),
        ("feedback", b""),
        ("/cds-services/sodium-workup", pv),
        ("/cds-services/sodium-order-select", sel),
        ("/cds-services/sodium-workup", pv),
        ("/cds-services/sodium-order-sign", sign),
        ("/cds-services/sodium-order-select", wrong),
    ]


def _slope(samples: list[tuple[int, float]]) -> float | None:
    """Least-squares slope of RSS (MiB) per 10,000 calls."""
    if len(samples) < 3:
        return None
    xs, ys = [s[0] for s in samples], [s[1] for s in samples]
    mx, my = sum(xs) / len(xs), sum(ys) / len(ys)
    den = sum((x - mx) ** 2 for x in xs)
    return round(sum((x - mx) * (y - my) for x, y in zip(xs, ys, strict=True)) / den * 1e4, 3)


async def _soak(args: argparse.Namespace, folder: Path) -> dict[str, Any]:
    app = _servers.in_process_app(folder, "soak")
    mix = _mix(args.observations)
    statuses: Counter[str] = Counter()
    samples: list[tuple[int, float]] = []
    last_cards: list[dict[str, Any]] = []
    done = 0
    every = max(1, args.calls // 60)
    started = time.perf_counter()
    async with (
        app.router.lifespan_context(app),
        httpx.AsyncClient(transport=httpx.ASGITransport(app), base_url="http://soak") as client,
    ):

        async def worker(offset: int) -> None:
            nonlocal done, last_cards
            i = offset
            while done < args.calls:
                done += 1
                path, raw = mix[i % len(mix)]
                i += 1
                if path == "feedback":
                    path = "/cds-services/sodium-workup/feedback"
                    raw = json.dumps(rq.feedback_body(last_cards[:3])).encode()
                r = await client.post(
                    path, content=raw, headers={"content-type": "application/json"}
                )
                statuses[str(r.status_code)] += 1
                if r.status_code == 200 and "cards" in r.text[:20]:
                    last_cards = r.json()["cards"]
                if done % every == 0:
                    samples.append((done, round(_servers.vm_rss() / 2**20, 2)))

        await asyncio.gather(*(worker(k) for k in range(args.concurrency)))
    elapsed = time.perf_counter() - started
    warm = [s for s in samples if s[0] >= args.calls * 0.1]
    second_half = [s for s in samples if s[0] >= args.calls * 0.5]
    slope = _slope(second_half)
    growth = round(warm[-1][1] - warm[0][1], 2) if len(warm) > 1 else None
    return {
        "benchmark": "soak",
        "command": "python -m benchmarks.soak " + " ".join(sys.argv[1:]),
        "machine": _servers.machine(),
        "calls": done,
        "concurrency": args.concurrency,
        "observations_per_request": args.observations,
        "seconds": round(elapsed, 1),
        "calls_per_second": round(done / elapsed, 1),
        "statuses": dict(statuses),
        "rss_mib_first_sample": samples[0][1] if samples else None,
        "rss_mib_after_warmup": warm[0][1] if warm else None,
        "rss_mib_end": samples[-1][1] if samples else None,
        "rss_growth_after_warmup_mib": growth,
        "rss_slope_second_half_mib_per_10k_calls": slope,
        "samples": samples,
        "goals": [
            {
                "goal": f"RSS bounded: second-half slope < {GOAL_SLOPE_MIB_PER_10K} MiB/10k calls",
                "value": slope,
                "pass": slope is not None and slope < GOAL_SLOPE_MIB_PER_10K,
            },
            {
                "goal": "no 5xx",
                "value": sum(v for k, v in statuses.items() if k.startswith("5")),
                "pass": not any(k.startswith("5") for k in statuses),
            },
        ],
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m benchmarks.soak", description=__doc__)
    p.add_argument("--calls", type=int, default=100_000)
    p.add_argument("--concurrency", type=int, default=4)
    p.add_argument("--observations", type=int, default=200)
    p.add_argument("--out", type=Path)
    args = p.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="tonicity-soak-") as tmp:
        result = asyncio.run(_soak(args, Path(tmp)))
    text = json.dumps(result, indent=1)
    if args.out:
        args.out.write_text(text + "\n", encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
