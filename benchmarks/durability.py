"""Crash durability: SIGKILL ``tonicity serve`` in the middle of a feedback load; after restart,
every feedback item that got a 200 must be in the database.

For each store (a SQLite file, then PostgreSQL when a URL is given or
``TONICITY_TEST_POSTGRES_URL`` is set; each run in its own fresh schema there), per round:
start ``tonicity serve --config`` (auth off, loopback), log cards with patient-view and
order-sign calls, then send single-item feedback on those cards from several concurrent
clients; after ``--kill-after`` seconds the whole process group gets SIGKILL (no shutdown
handler runs). The server is restarted on the same store, answers ``/readyz``, and the
feedback table is counted per card uuid and compared with the 200s the clients saw.
Feedback committed whose 200 never arrived (in flight at the kill) is counted, not an error.

    python -m benchmarks.durability [--rounds 3] [--kill-after 3] [--postgres-url URL]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import subprocess
import sys
import tempfile
import time
import uuid
from collections import Counter
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import create_engine, func, make_url, select, text

from benchmarks import _servers
from benchmarks import requests as rq

POSTGRES_ENV = "TONICITY_TEST_POSTGRES_URL"


async def _log_cards(base: str, calls: int) -> list[tuple[str, dict[str, Any]]]:
    """Hook calls whose cards go to the card log; returns (service id, card) pairs."""
    out: list[tuple[str, dict[str, Any]]] = []
    bodies = [
        ("sodium-workup", json.dumps(rq.hook_request("patient-view", 60)).encode()),
        ("sodium-order-sign", json.dumps(rq.hook_request("order-sign", 60)).encode()),
    ]
    async with httpx.AsyncClient(timeout=60) as client:
        for i in range(calls):
            sid, raw = bodies[i % 2]
            r = await client.post(
                f"{base}/cds-services/{sid}",
                content=raw,
                headers={"content-type": "application/json"},
            )
            r.raise_for_status()
            out += [(sid, card) for card in r.json()["cards"]]
    return out


async def _feedback_load(
    base: str, cards: list[tuple[str, dict[str, Any]]], clients: int, stop: asyncio.Event
) -> tuple[Counter[str], Counter[str]]:
    acked: Counter[str] = Counter()
    outcomes: Counter[str] = Counter()

    async def client_loop(k: int) -> None:
        async with httpx.AsyncClient(timeout=10) as client:
            i = k
            while not stop.is_set():
                sid, card = cards[i % len(cards)]
                i += clients
                try:
                    r = await client.post(
                        f"{base}/cds-services/{sid}/feedback", json=rq.feedback_body([card])
                    )
                except httpx.HTTPError as exc:
                    outcomes[type(exc).__name__] += 1
                    if stop.is_set():
                        return
                    await asyncio.sleep(0.05)
                    continue
                outcomes[str(r.status_code)] += 1
                if r.status_code == 200:
                    acked[card["uuid"]] += 1

    await asyncio.gather(*(client_loop(k) for k in range(clients)))
    return acked, outcomes


def _count_feedback(url: str) -> Counter[str]:
    engine = create_engine(url)
    try:
        from cds_service.store.schema import Feedback

        with engine.connect() as conn:
            rows = conn.execute(
                select(Feedback.card_uuid, func.count()).group_by(Feedback.card_uuid)
            ).all()
    finally:
        engine.dispose()
    return Counter({uid: int(n) for uid, n in rows})


async def _round(server: _servers.Server, args: argparse.Namespace) -> dict[str, Any]:
    server.start()
    cards = await _log_cards(server.base_url, args.hook_calls)
    stop = asyncio.Event()
    load = asyncio.create_task(_feedback_load(server.base_url, cards, args.clients, stop))
    await asyncio.sleep(args.kill_after)
    server.kill()  # SIGKILL to the whole process group, mid-load
    killed_at = time.time()
    stop.set()
    acked, outcomes = await load
    return {
        "cards_logged": len(cards),
        "acked": acked,
        "outcomes": outcomes,
        "killed_at": killed_at,
    }


def _check(url: str, server: _servers.Server, acked_total: Counter[str]) -> dict[str, Any]:
    server.start()  # restart on the same store
    ready = httpx.get(server.base_url + "/readyz", timeout=10).status_code
    server.stop()
    stored = _count_feedback(url)
    missing = {u: n - stored.get(u, 0) for u, n in acked_total.items() if stored.get(u, 0) < n}
    extra = sum(max(0, stored.get(u, 0) - n) for u, n in acked_total.items())
    return {
        "ready_after_restart": ready,
        "acked_items": sum(acked_total.values()),
        "stored_items": sum(stored.values()),
        "acked_but_missing": sum(missing.values()),
        "committed_without_ack": extra,
        "missing_examples": list(missing)[:5],
    }


def _run_store(label: str, url: str, args: argparse.Namespace, folder: Path) -> dict[str, Any]:
    port = _servers.free_port()
    config = _servers.write_config(folder, storage_url=url, port=port)
    server = _servers.Server(
        f"tonicity-{label}", _servers.tonicity_argv(config, port), port, folder
    )
    total: Counter[str] = Counter()
    rounds = []
    for _ in range(args.rounds):
        r = asyncio.run(_round(server, args))
        total.update(r["acked"])
        rounds.append(
            {
                "cards_logged": r["cards_logged"],
                "acked_items": sum(r["acked"].values()),
                "client_outcomes": dict(r["outcomes"]),
            }
        )
    result = _check(url, server, total)
    report = subprocess.run(
        [sys.executable, "-m", "cds_service.cli", "feedback-report", "--config", str(config)],
        capture_output=True,
        text=True,
        cwd=_servers.ROOT,
        check=False,
    )
    result["feedback_report_exit"] = report.returncode
    result["rounds"] = rounds
    result["pass"] = result["acked_but_missing"] == 0 and result["acked_items"] > 0
    return result


def _fresh_schema(url: str) -> tuple[str, str]:
    schema = f"durability_{uuid.uuid4().hex[:10]}"
    engine = create_engine(url)
    with engine.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    engine.dispose()
    scoped = make_url(url).update_query_dict({"options": f"-csearch_path={schema}"})
    return schema, scoped.render_as_string(hide_password=False)


def _drop_schema(url: str, schema: str) -> None:
    engine = create_engine(url)
    with engine.begin() as conn:
        conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
    engine.dispose()


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m benchmarks.durability", description=__doc__)
    p.add_argument("--rounds", type=int, default=3, help="kills per store")
    p.add_argument("--kill-after", type=float, default=3.0, help="seconds of feedback load")
    p.add_argument("--clients", type=int, default=8)
    p.add_argument("--hook-calls", type=int, default=20)
    p.add_argument("--postgres-url", default=os.environ.get(POSTGRES_ENV))
    args = p.parse_args(argv)
    result: dict[str, Any] = {
        "benchmark": "durability",
        "command": "python -m benchmarks.durability " + " ".join(sys.argv[1:]),
        "machine": _servers.machine(),
        "stores": {},
    }
    with tempfile.TemporaryDirectory(prefix="tonicity-durability-") as tmp:
        folder = Path(tmp)
        result["stores"]["sqlite"] = _run_store("sqlite", f"sqlite:///{folder}/d.db", args, folder)
        if args.postgres_url:
            schema, scoped = _fresh_schema(args.postgres_url)
            try:
                result["stores"]["postgresql"] = _run_store("postgresql", scoped, args, folder)
            finally:
                _drop_schema(args.postgres_url, schema)
        else:
            result["stores"]["postgresql"] = f"skipped: no --postgres-url and {POSTGRES_ENV} unset"
    result["goals"] = [
        {
            "goal": f"every acknowledged feedback stored after SIGKILL ({name})",
            "value": r["acked_but_missing"],
            "pass": r["pass"],
        }
        for name, r in result["stores"].items()
        if isinstance(r, dict)
    ]
    print(json.dumps(result, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
