"""The cost of the alert policy's repeat-suppression check per hook call, and a two-replica run.

In process (the whole app over ASGI, lifespan run), on a card log pre-filled with
``--prefill`` rows over ``--patients`` patients, rounds interleave three kinds of call so the
machine's drift hits them alike:

- ``baseline``: a call marked as replay traffic (``X-Tonicity-Replay``): the same path,
  rendering and card log, but no history query;
- ``check``: a live call for a patient never seen (the query runs, finds nothing, every
  card is shown): the cost of the check alone;
- ``repeat``: a live call for a chart already open (the query returns its history and the
  unchanged cards are suppressed, so less is rendered).

It prints the median milliseconds per call of each and the ratios to the baseline of the same
run, plus the history query alone (``recent()``, median microseconds). With ``--replicas 2``
the calls alternate between two app instances on one database (use ``--storage-url`` with a
PostgreSQL URL) and a five-opens scenario reports how many cards each open showed.

    python -m benchmarks.suppression
    python -m benchmarks.suppression --storage-url postgresql+psycopg://... --replicas 2
"""

from __future__ import annotations

import argparse
import asyncio
import json
import statistics
import sys
import tempfile
import time
import uuid
from contextlib import AsyncExitStack
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx

from benchmarks import _servers
from benchmarks import requests as rq


def _parse(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(prog="python -m benchmarks.suppression", description=__doc__)
    p.add_argument("--observations", type=int, default=200)
    p.add_argument("--rounds", type=int, default=8)
    p.add_argument("--calls", type=int, default=10, help="calls of each kind per round")
    p.add_argument("--prefill", type=int, default=50_000, help="card-log rows written first")
    p.add_argument("--patients", type=int, default=2_000)
    p.add_argument("--storage-url", help="database URL (default: a SQLite file)")
    p.add_argument("--replicas", type=int, default=1, choices=(1, 2))
    return p.parse_args(argv)


def _app(url: str) -> Any:
    from cds_service.app import create_app
    from cds_service.config import load_settings

    settings = load_settings(
        None,
        storage={"url": url},
        auth={"required": False},
        logging={"level": "WARNING", "patient_id_salt": "suppression-bench-salt"},
    )
    return create_app(settings)


def _prefill(store: Any, rows: int, patients: int) -> None:
    from cds_service.store.cards import CardLogRow, log_cards

    now = datetime.now(UTC)
    batch: list[CardLogRow] = []
    for i in range(rows):
        batch.append(
            CardLogRow(
                card_uuid=str(uuid.uuid4()),
                service_id="sodium-workup",
                finding_code="hyponatremia-tonicity-unknown",
                indicator="info",
                patient_hash=f"{i % patients:032x}",
                client_id=None,
                created_at=now - timedelta(minutes=(i * 7) % (24 * 60)),
                inputs_digest=f"{i:032x}",
            )
        )
        if len(batch) == 5_000:
            log_cards(store, batch)
            batch = []
    log_cards(store, batch)


def _body_for(template: str, patient: str) -> bytes:
    return template.replace(rq.PATIENT_ID, patient).encode()


async def _run(args: argparse.Namespace, url: str) -> dict[str, Any]:
    from cds_service.store.cards import Scope, recent

    apps = [_app(url) for _ in range(args.replicas)]
    template = json.dumps(rq.hook_request("patient-view", args.observations))
    path = "/cds-services/sodium-workup"
    headers = {"Content-Type": "application/json"}
    async with AsyncExitStack() as stack:
        clients = []
        for n, app in enumerate(apps):
            await stack.enter_async_context(app.router.lifespan_context(app))
            transport = httpx.ASGITransport(app)
            clients.append(
                await stack.enter_async_context(
                    httpx.AsyncClient(transport=transport, base_url=f"http://replica-{n}")
                )
            )
        store = apps[0].state.store
        _prefill(store, args.prefill, args.patients)
        turn = 0

        async def post(body: bytes, extra: dict[str, str] | None = None) -> tuple[float, int]:
            nonlocal turn
            client = clients[turn % len(clients)]
            turn += 1
            started = time.perf_counter()
            r = await client.post(path, content=body, headers={**headers, **(extra or {})})
            ms = (time.perf_counter() - started) * 1000
            if r.status_code != 200:
                raise SystemExit(f"the service answered {r.status_code}: {r.text[:300]}")
            return ms, len(r.json()["cards"])

        # Five opens of one chart (alternating replicas when there are two).
        five = [await post(_body_for(template, "lvh-pt-five-opens")) for _ in range(5)]
        open_chart = _body_for(template, "lvh-pt-open-chart")
        await post(open_chart)
        times: dict[str, list[float]] = {"baseline": [], "check": [], "repeat": []}
        for _ in range(args.rounds):
            for _ in range(args.calls):
                replay = {"X-Tonicity-Replay": uuid.uuid4().hex}
                fresh = _body_for(template, f"lvh-pt-{uuid.uuid4().hex[:12]}")
                times["baseline"].append((await post(fresh, replay))[0])
                fresh = _body_for(template, f"lvh-pt-{uuid.uuid4().hex[:12]}")
                times["check"].append((await post(fresh))[0])
                times["repeat"].append((await post(open_chart))[0])
        scope = Scope(patient_hash=f"{7:032x}", service_id="sodium-workup")
        query_us = []
        now = datetime.now(UTC)
        for _ in range(200):
            started = time.perf_counter()
            with store.engine.connect() as conn:  # as cds_service/alerts/live.py reads it
                recent(conn, scope, since=now - timedelta(hours=168), now=now)
            query_us.append((time.perf_counter() - started) * 1e6)
    median = {k: statistics.median(v) for k, v in times.items()}
    return {
        "median_ms": {k: round(v, 2) for k, v in median.items()},
        "ratio_check_to_baseline": round(median["check"] / median["baseline"], 3),
        "ratio_repeat_to_baseline": round(median["repeat"] / median["baseline"], 3),
        "history_query_median_us": round(statistics.median(query_us), 1),
        "history_rows_per_patient": args.prefill // args.patients,
        "five_opens_cards_shown": [n for _, n in five],
        "five_opens_ms": [round(ms, 1) for ms, _ in five],
        "calls_per_kind": len(times["baseline"]),
    }


def main(argv: list[str] | None = None) -> int:
    args = _parse(argv)
    with tempfile.TemporaryDirectory() as tmp:
        url = args.storage_url or f"sqlite:///{Path(tmp) / 'suppression.db'}"
        result = asyncio.run(_run(args, url))
    safe = url.split("@")[-1] if "@" in url else "sqlite (temporary file)"
    out = {
        "benchmark": "suppression",
        "database": safe,
        "replicas": args.replicas,
        "observations": args.observations,
        "prefilled_rows": args.prefill,
        **result,
        "machine": _servers.machine(),
        "command": " ".join(
            ["python -m benchmarks.suppression"]
            + [a.split("@")[-1] if "@" in a else a for a in sys.argv[1:]]  # no password
        ),
    }
    print(json.dumps(out, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
