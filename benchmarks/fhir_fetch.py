"""FHIR-fetch benchmark: a patient-view call with no prefetch, the data fetched from a local FHIR
stub that delays every query by a fixed time.

Starts the stub (``benchmarks/fhir_stub.py``) and ``tonicity serve`` (a local trial: auth
off on loopback, so an anonymous caller may name any fhirServer, see
``cds_service.hooks.auth.fhir_server_allowed``). Measures, alternating call by call, the
service's total latency and the latency of the slowest single query sent straight to the stub,
and prints JSON with the ratio (issue 7 goal: under 1.5, i.e. the queries run concurrently
through one reused client), the sum of the single queries (what a sequential fetch would
cost), the same call with everything prefetched (the service's own processing time, so the
fetch's share can be read off) and the most queries the stub saw in flight at once.

    python -m benchmarks.fhir_fetch [--delay 0.2] [--calls 15]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any
from urllib.parse import quote

import httpx

from benchmarks import _servers
from benchmarks import requests as rq

GOAL_RATIO = 1.5


def _queries(context: dict[str, Any]) -> dict[str, str]:
    from cds_service.hooks.registry import fill

    return {key: fill(t, context) for key, t in rq.service_templates().items()}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m benchmarks.fhir_fetch", description=__doc__)
    p.add_argument("--delay", type=float, default=0.2, help="seconds per stub query")
    p.add_argument("--calls", type=int, default=15)
    p.add_argument("--observations", type=int, default=200)
    args = p.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="tonicity-fetch-") as tmp:
        folder = Path(tmp)
        stub_port, port = _servers.free_port(), _servers.free_port()
        stub = _servers.Server(
            "fhir-stub",
            _servers.uvicorn_argv("benchmarks.fhir_stub:app", stub_port),
            stub_port,
            folder,
            env={"BENCH_STUB_DELAY": str(args.delay), "BENCH_STUB_OBS": str(args.observations)},
        )
        config = _servers.write_config(folder, storage_url=f"sqlite:///{folder}/f.db", port=port)
        service = _servers.Server("tonicity", _servers.tonicity_argv(config, port), port, folder)
        with stub, service:
            result = _run(service, stub, args)
    print(json.dumps(result, indent=1))
    return 0


def _run(
    service: _servers.Server, stub: _servers.Server, args: argparse.Namespace
) -> dict[str, Any]:
    base = stub.base_url + "/fhir"
    body = rq.hook_request("patient-view", args.observations, prefetch=False, fhir_server=base)
    queries = _queries(body["context"])
    url = service.base_url + "/cds-services/sodium-workup"
    with_prefetch = rq.hook_request("patient-view", args.observations)
    service_ms: list[float] = []
    prefetch_ms: list[float] = []
    slowest_ms: list[float] = []
    sum_ms: list[float] = []
    statuses: list[int] = []
    cards: list[str] = []
    with httpx.Client(timeout=60) as client:
        client.post(url, json=body)  # warm-up: imports, data files, connection pool
        for _ in range(args.calls):
            t0 = time.perf_counter()
            r = client.post(url, json=body)
            service_ms.append((time.perf_counter() - t0) * 1000)
            statuses.append(r.status_code)
            if r.status_code == 200:
                cards = sorted(c["source"]["topic"]["code"] for c in r.json()["cards"])
            singles = []
            for q in queries.values():
                t0 = time.perf_counter()
                client.get(f"{base}/{quote(q, safe='/?=&,:|{}')}")
                singles.append((time.perf_counter() - t0) * 1000)
            slowest_ms.append(max(singles))
            t0 = time.perf_counter()
            client.post(url, json=with_prefetch)
            prefetch_ms.append((time.perf_counter() - t0) * 1000)
            sum_ms.append(sum(singles))
        stats = client.get(stub.base_url + "/_stats").json()
    med_service = statistics.median(service_ms)
    med_slowest = statistics.median(slowest_ms)
    ratio = round(med_service / med_slowest, 3)
    return {
        "benchmark": "fhir_fetch",
        "command": "python -m benchmarks.fhir_fetch " + " ".join(sys.argv[1:]),
        "machine": _servers.machine(),
        "delay_per_query_s": args.delay,
        "queries_per_call": len(queries),
        "calls": args.calls,
        "statuses": sorted(set(statuses)),
        "cards": cards,
        "service_ms": {"p50": round(med_service, 1), "max": round(max(service_ms), 1)},
        "slowest_single_query_ms_p50": round(med_slowest, 1),
        "same_call_with_full_prefetch_ms_p50": round(statistics.median(prefetch_ms), 1),
        "fetch_overhead_ms_p50": round(med_service - statistics.median(prefetch_ms), 1),
        "sum_of_single_queries_ms_p50": round(statistics.median(sum_ms), 1),
        "stub_max_queries_in_flight": stats.get("max_in_flight"),
        "ratio_service_over_slowest_query": ratio,
        "goals": [
            {
                "goal": f"total latency < {GOAL_RATIO} x the slowest single query",
                "value": ratio,
                "pass": ratio < GOAL_RATIO and set(statuses) == {200},
            }
        ],
    }


if __name__ == "__main__":
    sys.exit(main())
