"""A tiny FHIR R4 server stub for the fetch benchmark: one invented patient's record, each
query answered after a fixed delay.

Environment: ``BENCH_STUB_DELAY`` (seconds per query, default 0.2), ``BENCH_STUB_OBS``
(Observations in the record, default 200). Searches are answered by the same query runner
``tonicity evaluate`` uses (every match in one searchset page). ``GET /_stats`` reports how
many queries were served and the most that were in flight at once (proof of concurrency).

    BENCH_STUB_DELAY=0.2 uvicorn benchmarks.fhir_stub:app --port 8090
"""

from __future__ import annotations

import asyncio
import json
import os
from typing import Any
from urllib.parse import unquote

from benchmarks import requests as rq

DELAY = float(os.environ.get("BENCH_STUB_DELAY", "0.2"))
RECORD = rq.record(int(os.environ.get("BENCH_STUB_OBS", "200")))
_stats = {"served": 0, "in_flight": 0, "max_in_flight": 0}


async def _send(send: Any, status: int, body: object) -> None:
    raw = json.dumps(body).encode()
    headers = [(b"content-type", b"application/fhir+json"), (b"content-length", b"%d" % len(raw))]
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": raw})


async def app(scope: dict[str, Any], receive: Any, send: Any) -> None:
    if scope["type"] == "lifespan":
        while (await receive())["type"] != "lifespan.shutdown":
            await send({"type": "lifespan.startup.complete"})
        await send({"type": "lifespan.shutdown.complete"})
        return
    path = scope["path"]
    if path in ("/_stats", "/healthz"):
        await _send(send, 200, _stats)
        return
    from cds_service.hooks.client import run_query

    _stats["in_flight"] += 1
    _stats["max_in_flight"] = max(_stats["max_in_flight"], _stats["in_flight"])
    try:
        await asyncio.sleep(DELAY)
        query = path.removeprefix("/fhir/")
        if scope["query_string"]:
            query += "?" + unquote(scope["query_string"].decode())
        try:
            result = run_query(query, RECORD)
        except Exception as exc:
            await _send(
                send,
                400,
                {
                    "resourceType": "OperationOutcome",
                    "issue": [
                        {"severity": "error", "code": "not-supported", "diagnostics": str(exc)}
                    ],
                },
            )
            return
        if result is None:
            await _send(
                send,
                404,
                {
                    "resourceType": "OperationOutcome",
                    "issue": [{"severity": "error", "code": "not-found"}],
                },
            )
            return
        await _send(send, 200, result)
    finally:
        _stats["in_flight"] -= 1
        _stats["served"] += 1
