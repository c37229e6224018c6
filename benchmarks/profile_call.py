"""CPU per hook call, in process: the whole app over ASGI (lifespan run), no network, no
load generator, so the figure is Tonicity's own cost. With ``--profile`` it also prints
cProfile's top functions (to stderr) for the same calls, which is where EVIDENCE.md's shares
come from.

    python -m benchmarks.profile_call                          # 200 Observations, 200 calls
    python -m benchmarks.profile_call --observations 5000 --calls 15
    python -m benchmarks.profile_call --hook order-select --profile 40 --sort tottime

Prints one JSON document: CPU and wall milliseconds per call (median of rounds of calls), the
cards returned, the machine and the command.
"""

from __future__ import annotations

import argparse
import asyncio
import cProfile
import json
import pstats
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import httpx

from benchmarks import _servers
from benchmarks import requests as rq


def _parse(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(prog="python -m benchmarks.profile_call", description=__doc__)
    p.add_argument("--hook", choices=sorted(rq.SERVICE_IDS), default="patient-view")
    p.add_argument("--observations", type=int, default=200)
    p.add_argument("--calls", type=int, default=200, help="measured calls (in 5 rounds)")
    p.add_argument("--profile", type=int, default=0, metavar="N", help="print the top N")
    p.add_argument("--sort", default="cumulative", help="cProfile sort key (tottime, ...)")
    return p.parse_args(argv)


async def _run(args: argparse.Namespace, folder: Path) -> dict[str, Any]:
    app = _servers.in_process_app(folder, "profile")
    body = json.dumps(rq.hook_request(args.hook, args.observations)).encode()
    path = f"/cds-services/{rq.SERVICE_IDS[args.hook]}"
    headers = {"Content-Type": "application/json"}
    transport = httpx.ASGITransport(app)
    async with (
        app.router.lifespan_context(app),
        httpx.AsyncClient(transport=transport, base_url="http://profile") as client,
    ):

        async def call() -> httpx.Response:
            r = await client.post(path, content=body, headers=headers)
            if r.status_code != 200:
                raise SystemExit(f"the service answered {r.status_code}: {r.text[:300]}")
            return r

        for _ in range(5):  # warm-up: memos, pools, first-call imports
            cards = [c.get("summary", "") for c in (await call()).json()["cards"]]
        per_round = max(1, args.calls // 5)
        cpu, wall = [], []
        for _ in range(5):
            c0, w0 = time.process_time(), time.perf_counter()
            for _ in range(per_round):
                await call()
            cpu.append((time.process_time() - c0) * 1000 / per_round)
            wall.append((time.perf_counter() - w0) * 1000 / per_round)
        if args.profile:
            profiler = cProfile.Profile()
            profiler.enable()
            for _ in range(per_round):
                await call()
            profiler.disable()
            stats = pstats.Stats(profiler, stream=sys.stderr)
            stats.sort_stats(args.sort).print_stats(args.profile)
    return {
        "cpu_ms_per_call": round(statistics.median(cpu), 3),
        "wall_ms_per_call": round(statistics.median(wall), 3),
        "cpu_ms_per_round": [round(x, 3) for x in cpu],
        "calls": per_round * 5,
        "cards": cards,
    }


def main(argv: list[str] | None = None) -> int:
    args = _parse(argv)
    with tempfile.TemporaryDirectory(prefix="tonicity-profile-") as tmp:
        figures = asyncio.run(_run(args, Path(tmp)))
    result = {
        "benchmark": "profile_call",
        "command": "python -m benchmarks.profile_call "
        + " ".join(argv if argv is not None else sys.argv[1:]),
        "machine": _servers.machine(),
        "hook": args.hook,
        "observations": args.observations,
        "request_bytes": len(json.dumps(rq.hook_request(args.hook, args.observations))),
        **figures,
    }
    print(json.dumps(result, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
