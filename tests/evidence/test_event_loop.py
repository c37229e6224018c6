"""Hook calls are evaluated off the event loop (issue 14, defect 2).

A real server (uvicorn in a thread) gets a hook call whose ingestion is held at a gate: the
stand-in for a call that takes seconds of CPU without yielding (100,000 Observations held
``/healthz`` for more than 12 s when this work ran on the loop). While it is held,
``/healthz`` and ``/readyz`` must answer, a small call must be answered, and a large call
beyond ``server.max_large_calls`` must get 503 with Retry-After and an OperationOutcome.
On the loop, ``/healthz`` would not answer until the gate opened (the client's timeout, far
shorter than the gate's, makes that a failure rather than a hang).
"""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx
import pytest

from cds_service.hooks import service
from cds_service.hooks.timeshift import shift_times
from tests.kit.conftest import SAMPLES, live_server, manifest_samples

GATE_SECONDS = 60.0  # the held call's bound if the test fails: never a hang
PROBE_SECONDS = 10.0  # how long /healthz may take before that counts as not answering


class Gate:
    def __init__(self) -> None:
        self.entered = threading.Event()
        self.release = threading.Event()
        self.threads: list[str] = []


@pytest.fixture
def gate(monkeypatch: pytest.MonkeyPatch) -> Iterator[Gate]:
    g = Gate()
    original = service.build_context

    def held(*args: Any, **kwargs: Any) -> Any:
        g.threads.append(threading.current_thread().name)
        g.entered.set()
        g.release.wait(GATE_SECONDS)  # blocks its thread, as CPU work that never yields
        return original(*args, **kwargs)

    monkeypatch.setattr(service, "build_context", held)
    try:
        yield g
    finally:
        g.release.set()


def _request() -> bytes:
    """A sample's patient-view request, its timeline moved so that its 'now' is now."""
    name = "requests/p04-siadh-si-units-patient-view.json"
    written_for = next(s["now"] for s in manifest_samples() if s["file"] == name)
    request = json.loads((SAMPLES / name).read_text("utf-8"))
    delta = datetime.now(UTC) - datetime.fromisoformat(written_for)
    return json.dumps(shift_times(request, delta)).encode()


def _server(tmp_path: Path, **server: Any) -> Any:
    return live_server(
        tmp_path,
        auth={"required": False},
        local_trial=True,
        logging={"level": "WARNING"},
        **({"server": server} if server else {}),
    )


def _post(url: str, body: bytes) -> httpx.Response:
    return httpx.post(
        f"{url}/cds-services/sodium-workup",
        content=body,
        headers={"Content-Type": "application/json"},
        timeout=GATE_SECONDS + 30,
    )


def test_healthz_and_readyz_answer_while_a_call_is_held(tmp_path: Path, gate: Gate) -> None:
    body = _request()
    with _server(tmp_path) as url, ThreadPoolExecutor(2) as pool:
        server = url
        held: Future[httpx.Response] = pool.submit(_post, url, body)
        assert gate.entered.wait(GATE_SECONDS), "the call never reached ingestion"
        try:
            health = httpx.get(f"{url}/healthz", timeout=PROBE_SECONDS)
            ready = httpx.get(f"{url}/readyz", timeout=PROBE_SECONDS)
        finally:
            gate.release.set()
        assert (health.status_code, health.json()) == (200, {"status": "ok"})
        assert ready.status_code == 200
        assert not held.done() or held.result().status_code == 200
        answer = held.result()
    assert answer.status_code == 200 and answer.json()["cards"], server
    assert gate.threads and all(t.startswith("tonicity-eval-") for t in gate.threads)


def test_a_large_call_beyond_the_limit_gets_503_and_small_calls_still_run(
    tmp_path: Path, gate: Gate
) -> None:
    body = _request()
    assert len(body) > 1024  # large under the setting below
    settings = {"large_call_bytes": 1024, "max_large_calls": 1, "evaluation_threads": 2}
    with _server(tmp_path, **settings) as url, ThreadPoolExecutor(2) as pool:
        held = pool.submit(_post, url, body)
        assert gate.entered.wait(GATE_SECONDS)
        try:
            busy = _post(url, body)
            small = _post(url, b'{"hook": "patient-view"}')
            chunked = httpx.post(  # no Content-Length: counted while read, refused the same
                f"{url}/cds-services/sodium-workup",
                content=iter([body[:600], body[600:]]),
                headers={"Content-Type": "application/json"},
                timeout=PROBE_SECONDS,
            )
        finally:
            gate.release.set()
        first = held.result()
        after = _post(url, body)  # the slot is free again
    for refused in (busy, chunked):
        assert refused.status_code == 503
        assert refused.headers["Retry-After"] == "5"
        outcome = refused.json()
        assert outcome["resourceType"] == "OperationOutcome"
        assert outcome["issue"][0]["code"] == "transient"
    assert small.status_code == 400  # answered (a validation error), not refused
    assert first.status_code == 200 and after.status_code == 200


def test_max_large_calls_must_leave_a_thread_for_small_calls() -> None:
    from cds_service.config import load_settings
    from cds_service.errors import UserError

    with pytest.raises(UserError, match=r"below server\.evaluation_threads"):
        load_settings(None, server={"evaluation_threads": 2, "max_large_calls": 2})
    assert load_settings(None, server={"evaluation_threads": 3, "max_large_calls": 2})
