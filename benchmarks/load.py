"""Load benchmark: Tonicity against a bare FastAPI baseline, in the same run, on loopback.

Starts Tonicity under uvicorn (one worker, then two; auth off, SQLite in a temporary folder)
and the baseline (``benchmarks/baseline_app.py``, same uvicorn settings), and drives both
alternately with the same closed-loop generator (wrk, or httpx when wrk is missing) and the
same request bodies (``benchmarks/requests.py``): patient-view with about 200 Observations and
order-select with three draft orders, at concurrency 1, 8 and 32. Then it compares the cost of
a 5,000-Observation prefetch with the 200-Observation one (sequential calls), and fits a line
through the latencies at 200, 1,000, 2,500 and 5,000 Observations.

Prints one JSON document: per configuration p50/p95/p99 latency, throughput and errors of
both servers, the ratios service/baseline, the generator's CPU use, the service's CPU per
request, resident memory of each process of both servers, and the goals of issue 17 evaluated
(pass/fail; never asserted anywhere).

    python -m benchmarks.load            # full run, about 6 to 10 minutes
    python -m benchmarks.load --quick    # about one minute
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx

from benchmarks import _loadgen, _servers
from benchmarks import requests as rq

HOOKS = ("patient-view", "order-select")
# Goals of issue 17 (the second speed pass); issue 7's were 1.3 x p50, 0.7 x throughput and
# a 5,000/200 cost ratio under 10, judged against the same baseline.
GOAL_P50_RATIO = 2.0  # p50 at concurrency 1 and 8: at most 2.0 x the baseline's
GOAL_THROUGHPUT_RATIO = 0.5  # at concurrency 32: at least 0.5 x the baseline's
GOAL_TAIL = 2.0  # at concurrency 8: the service's own p99 at most 2 x its p50
GOAL_SLOPE_RATIO = 1.5  # cost per extra Observation (fit 200..5,000) <= 1.5 x baseline's
SCALING_SIZES = (200, 1000, 2500, 5000)  # patient-view prefetch sizes of the scaling run


def _parse(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(prog="python -m benchmarks.load", description=__doc__)
    p.add_argument("--quick", action="store_true", help="one worker, one round of 2 s (~1 min)")
    p.add_argument("--workers", default=None, help="comma list, default 1,2 (quick: 1)")
    p.add_argument("--concurrency", default="1,8,32")
    p.add_argument("--seconds", type=float, default=None, help="per measured run (default 5)")
    p.add_argument("--rounds", type=int, default=None, help="alternations (default 2)")
    p.add_argument("--scaling-calls", type=int, default=None, help="calls per size (default 9)")
    p.add_argument("--hooks", default=",".join(HOOKS))
    p.add_argument("--httpx", action="store_true", help="use the httpx generator, not wrk")
    p.add_argument("--out", type=Path, help="also write the JSON here")
    p.add_argument(
        "--storage-url",
        help="Tonicity's database (default: a SQLite file in a temporary folder), e.g. the "
        "PostgreSQL URL a multi-worker deployment would use",
    )
    args = p.parse_args(argv)
    args.workers = [int(w) for w in (args.workers or ("1" if args.quick else "1,2")).split(",")]
    args.concurrency = [int(c) for c in args.concurrency.split(",")]
    args.hooks = [h for h in args.hooks.split(",") if h]
    args.seconds = args.seconds or (2.0 if args.quick else 5.0)
    args.rounds = args.rounds or (1 if args.quick else 2)
    args.scaling_calls = args.scaling_calls or (3 if args.quick else 9)
    return args


def _aggregate(runs: list[_loadgen.RunResult]) -> dict[str, Any]:
    total_req = sum(r.requests for r in runs)
    total_s = sum(r.seconds for r in runs)
    return {
        "requests": total_req,
        "errors": sum(r.errors for r in runs),
        "p50_ms": round(statistics.median(r.p50_ms for r in runs), 3),
        "p95_ms": round(statistics.median(r.p95_ms for r in runs), 3),
        "p99_ms": round(statistics.median(r.p99_ms for r in runs), 3),
        "max_ms": round(max(r.max_ms for r in runs), 3),
        "throughput_rps": round(total_req / total_s, 1) if total_s else 0.0,
        "generator_cpu": round(statistics.mean(r.generator_cpu for r in runs), 3),
        "rounds": [r.as_dict() for r in runs],
    }


def _ratio(a: float, b: float) -> float | None:
    return round(a / b, 3) if b else None


def _probe(url: str, body_path: Path) -> dict[str, Any]:
    """One call to check the answer is a real one (status, finding codes), before timing."""
    r = httpx.post(
        url,
        content=body_path.read_bytes(),
        headers={"Content-Type": "application/json"},
        timeout=60,
    )
    out: dict[str, Any] = {"status": r.status_code}
    try:
        data = r.json()
    except ValueError:
        out["body"] = r.text[:300]
        return out
    if r.status_code == 200 and isinstance(data, dict):
        out["cards"] = sorted(
            c.get("source", {}).get("topic", {}).get("code", "?") for c in data.get("cards", [])
        )
    else:
        out["body"] = json.dumps(data)[:300]
    return out


def _sequential_median(url: str, body: bytes, calls: int) -> tuple[float, list[int]]:
    times, statuses = [], []
    with httpx.Client(timeout=120) as client:
        for _ in range(calls):
            t0 = time.perf_counter()
            r = client.post(url, content=body, headers={"Content-Type": "application/json"})
            times.append((time.perf_counter() - t0) * 1000)
            statuses.append(r.status_code)
    return statistics.median(times), statuses


def _scaling(
    service: _servers.Server, baseline: _servers.Server, bodies: dict[str, Path], calls: int
) -> dict[str, Any]:
    """Sequential patient-view calls at every size of ``SCALING_SIZES``, sizes alternated call
    by call: the 5,000/200 ratios, and a straight-line fit of latency against the number of
    Observations (intercept, cost per Observation, R^2) for each server, whose slopes the goal
    compares."""
    path = "/cds-services/sodium-workup"
    med: dict[str, list[float]] = {}
    statuses: dict[str, list[int]] = {}
    for _ in range(calls):
        for label, target in (("service", service), ("baseline", baseline)):
            for size in SCALING_SIZES:
                body = bodies[f"patient-view-{size}"].read_bytes()
                t, st = _sequential_median(target.base_url + path, body, 1)
                med.setdefault(f"{label}_{size}", []).append(t)
                statuses.setdefault(f"{label}_{size}", []).extend(st)
    m = {k: round(statistics.median(v), 2) for k, v in med.items()}
    added_200 = m["service_200"] - m["baseline_200"]
    added_5000 = m["service_5000"] - m["baseline_5000"]
    fits = {label: _fit(m, label) for label in ("service", "baseline")}
    return {
        "calls_per_size": calls,
        "median_ms": m,
        "statuses": {k: sorted(set(v)) for k, v in statuses.items()},
        "service_ratio_5000_over_200": _ratio(m["service_5000"], m["service_200"]),
        "baseline_ratio_5000_over_200": _ratio(m["baseline_5000"], m["baseline_200"]),
        "added_cost_ratio_5000_over_200": _ratio(added_5000, added_200),
        "linear_fit": fits,
        "slope_ratio": _ratio(
            fits["service"]["us_per_observation"], fits["baseline"]["us_per_observation"]
        ),
    }


def _fit(medians: dict[str, float], label: str) -> dict[str, float]:
    """Least-squares line through (Observations, median ms) of one server."""
    xs = [float(n) for n in SCALING_SIZES]
    ys = [medians[f"{label}_{n}"] for n in SCALING_SIZES]
    slope, intercept = statistics.linear_regression(xs, ys)
    return {
        "intercept_ms": round(intercept, 2),
        "us_per_observation": round(slope * 1000, 2),
        "r_squared": round(statistics.correlation(xs, ys) ** 2, 4),
    }


def _measure(
    service: _servers.Server,
    baseline: _servers.Server,
    url_path: str,
    body: Path,
    concurrency: int,
    args: argparse.Namespace,
) -> dict[str, Any]:
    runs: dict[str, list[_loadgen.RunResult]] = {"service": [], "baseline": []}
    cpu_ms: list[float] = []
    for rnd in range(args.rounds):
        order = (("baseline", baseline), ("service", service))
        for label, target in order if rnd % 2 == 0 else order[::-1]:
            cpu0 = target.cpu_seconds()
            res = _loadgen.run(
                target.base_url + url_path, body, concurrency, args.seconds, use_wrk=args.use_wrk
            )
            runs[label].append(res)
            if label == "service" and res.requests:
                cpu_ms.append((target.cpu_seconds() - cpu0) * 1000 / res.requests)
    svc, base = _aggregate(runs["service"]), _aggregate(runs["baseline"])
    svc["server_cpu_ms_per_request"] = round(statistics.mean(cpu_ms), 3) if cpu_ms else None
    return {
        "concurrency": concurrency,
        "service": svc,
        "baseline": base,
        "ratios": {
            "p50": _ratio(svc["p50_ms"], base["p50_ms"]),
            "p95": _ratio(svc["p95_ms"], base["p95_ms"]),
            "p99": _ratio(svc["p99_ms"], base["p99_ms"]),
            "throughput": _ratio(svc["throughput_rps"], base["throughput_rps"]),
        },
    }


def _goals(results: dict[str, Any]) -> list[dict[str, Any]]:
    goals: list[dict[str, Any]] = []

    def add(name: str, value: float | None, ok: Callable[[float], bool]) -> None:
        goals.append({"goal": name, "value": value, "pass": value is not None and ok(value)})

    errors = 0
    for cfg in results["configurations"]:
        w, hook = cfg["workers"], cfg["hook"]
        for m in cfg["measurements"]:
            c, ratios = m["concurrency"], m["ratios"]
            errors += m["service"]["errors"]
            if c in (1, 8):
                add(
                    f"p50 <= {GOAL_P50_RATIO} x baseline ({hook}, {w}w, c={c})",
                    ratios["p50"],
                    lambda v: v <= GOAL_P50_RATIO,
                )
            if c == 8:
                add(
                    f"p99 <= {GOAL_TAIL} x own p50 ({hook}, {w}w, c=8)",
                    _ratio(m["service"]["p99_ms"], m["service"]["p50_ms"]),
                    lambda v: v <= GOAL_TAIL,
                )
            if c == 32:
                add(
                    f"throughput >= {GOAL_THROUGHPUT_RATIO} x baseline ({hook}, {w}w, c=32)",
                    ratios["throughput"],
                    lambda v: v >= GOAL_THROUGHPUT_RATIO,
                )
    add("zero errors (service, all runs)", errors, lambda v: v == 0)
    scaling = results.get("scaling")
    if scaling:
        fit = scaling["linear_fit"]
        add(
            f"cost per extra Observation <= {GOAL_SLOPE_RATIO} x baseline's "
            f"(R2 service {fit['service']['r_squared']}, baseline {fit['baseline']['r_squared']})",
            scaling["slope_ratio"],
            lambda v: v <= GOAL_SLOPE_RATIO,
        )
    return goals


def main(argv: list[str] | None = None) -> int:
    args = _parse(argv)
    args.use_wrk = _loadgen.have_wrk() and not args.httpx
    results: dict[str, Any] = {
        "benchmark": "load",
        "command": "python -m benchmarks.load "
        + " ".join(argv if argv is not None else sys.argv[1:]),
        "machine": _servers.machine(),
        "generator": "wrk (1 thread)" if args.use_wrk else "httpx asyncio",
        "settings": {
            "workers": args.workers,
            "concurrency": args.concurrency,
            "seconds": args.seconds,
            "rounds": args.rounds,
            "hooks": args.hooks,
            "storage": (args.storage_url or "sqlite").split(":", 1)[0].split("+", 1)[0],
        },
        "configurations": [],
    }
    with tempfile.TemporaryDirectory(prefix="tonicity-load-") as tmp:
        folder = Path(tmp)
        bodies: dict[str, Path] = {}
        sizes = [("order-select", 200)] + [("patient-view", n) for n in SCALING_SIZES]
        for hook, n in sizes:
            body = rq.hook_request(hook, n)
            path = folder / f"{hook}-{n}.json"
            path.write_text(json.dumps(body), encoding="utf-8")
            bodies[f"{hook}-{n}"] = path
            results.setdefault("bodies", {})[f"{hook}-{n}"] = {
                "bytes": path.stat().st_size,
                "observations": rq.count_observations(body),
            }
        for workers in args.workers:
            try:
                _run_workers(workers, folder, bodies, args, results)
            except RuntimeError as exc:  # a server that would not start: say so, keep the rest
                results.setdefault("failures", []).append(f"{workers} worker(s): {exc}")
    results["goals"] = _goals(results)
    text = json.dumps(results, indent=1)
    if args.out:
        args.out.write_text(text + "\n", encoding="utf-8")
    print(text)
    return 0


def _run_workers(
    workers: int,
    folder: Path,
    bodies: dict[str, Path],
    args: argparse.Namespace,
    results: dict[str, Any],
) -> None:
    sport, bport = _servers.free_port(), _servers.free_port()
    storage_url = args.storage_url or f"sqlite:///{folder / f'bench-{workers}w.db'}"
    config = _servers.write_config(folder, storage_url=storage_url, port=sport)
    service = _servers.Server(
        f"tonicity-{workers}w",
        _servers.uvicorn_argv("benchmarks._entry:make_app", sport, workers=workers, factory=True),
        sport,
        folder,
        env={"TONICITY_BENCH_CONFIG": str(config)},
        probe="/readyz",
    )
    baseline = _servers.Server(
        f"baseline-{workers}w",
        _servers.uvicorn_argv("benchmarks.baseline_app:app", bport, workers=workers),
        bport,
        folder,
    )
    with service, baseline:
        for hook in args.hooks:
            path = f"/cds-services/{rq.SERVICE_IDS[hook]}"
            body = bodies[f"{hook}-200"]
            cfg: dict[str, Any] = {
                "workers": workers,
                "hook": hook,
                "probe": _probe(service.base_url + path, body),
                "measurements": [],
            }
            for target in (baseline, service):  # warm-up, not measured
                _loadgen.run(target.base_url + path, body, 8, 1, use_wrk=args.use_wrk)
            for c in args.concurrency:
                cfg["measurements"].append(_measure(service, baseline, path, body, c, args))
            results["configurations"].append(cfg)
            print(f"# {workers} worker(s) {hook} done", file=sys.stderr)
        if workers == args.workers[0]:
            results["scaling"] = _scaling(service, baseline, bodies, args.scaling_calls)
        for label, target in (("service", service), ("baseline", baseline)):
            per_process = [b / 2**20 for b in target.rss_per_process()]
            results.setdefault(f"{label}_rss_mib", {})[f"{workers}w"] = round(sum(per_process), 1)
            results.setdefault(f"{label}_rss_mib_per_process", {})[f"{workers}w"] = [
                round(r, 1) for r in per_process
            ]


if __name__ == "__main__":
    sys.exit(main())
