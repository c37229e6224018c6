"""Graceful shutdown of `tonicity serve` (a real process): on SIGTERM an in-flight hook call
still gets its answer and the process exits cleanly (uvicorn's documented shutdown sequence:
stop accepting, finish open requests, run the application's shutdown)."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import httpx
import pytest

from cds_service.hooks.timeshift import shift_times

from .conftest import SAMPLES, free_port

pytestmark = pytest.mark.skipif(os.name != "posix", reason="needs POSIX signals")


class _SlowFhir(BaseHTTPRequestHandler):
    """A FHIR server that takes its time: the hook call is in flight while it sleeps."""

    called = threading.Event()

    def do_GET(self) -> None:
        type(self).called.set()
        time.sleep(1.5)
        body = json.dumps({"resourceType": "Bundle", "type": "searchset", "total": 0}).encode()
        self.send_response(200)
        self.send_header("Content-Type", "application/fhir+json")
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, *args: Any) -> None:
        pass


def test_sigterm_lets_the_in_flight_request_finish(tmp_path: Path) -> None:
    fhir = ThreadingHTTPServer(("127.0.0.1", 0), _SlowFhir)
    threading.Thread(target=fhir.serve_forever, daemon=True).start()
    port = free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("TONICITY_")}
    proc = subprocess.Popen(
        [sys.executable, "-m", "cds_service.cli", "serve", "--port", str(port)],
        cwd=tmp_path,
        env=dict(env, PYTHONPATH=str(SAMPLES.parent)),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 30
        while True:
            try:
                if httpx.get(f"{url}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            assert proc.poll() is None and time.monotonic() < deadline, "server did not start"
            time.sleep(0.1)
        body = json.loads(
            (SAMPLES / "requests" / "p03-tonicity-unknown-patient-view.json").read_text()
        )
        body = shift_times(body, datetime.now(UTC) - datetime(2026, 3, 14, 9, tzinfo=UTC))
        del body["prefetch"]["labs"]  # fetched from the slow server during the call
        body["fhirServer"] = f"http://127.0.0.1:{fhir.server_address[1]}/fhir"
        result: dict[str, Any] = {}

        def call() -> None:
            r = httpx.post(f"{url}/cds-services/sodium-workup", json=body, timeout=30)
            result["status"], result["body"] = r.status_code, r.json()

        caller = threading.Thread(target=call)
        caller.start()
        assert _SlowFhir.called.wait(20), "the service never called the FHIR server"
        proc.send_signal(signal.SIGTERM)
        caller.join(30)
        assert result.get("status") == 200, result
        assert isinstance(result["body"]["cards"], list)
        # uvicorn re-raises the captured SIGTERM once shut down, so -SIGTERM is a clean exit
        assert proc.wait(timeout=30) in (0, -signal.SIGTERM)
        err = proc.stderr.read() if proc.stderr else ""
        assert "Traceback" not in err
        # the lifespan shutdown (which closes the database pool) runs after the answer
        answered = err.index("POST /cds-services/sodium-workup")
        assert answered < err.index("Application shutdown complete")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        fhir.shutdown()
