"""Shared helpers of the integrator-kit tests: the sample folder, its manifest, a live server."""

from __future__ import annotations

import json
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

SAMPLES = Path(__file__).resolve().parents[2] / "sample_bundles"
DOCKER = Path(__file__).resolve().parents[2] / "docker"


def load_manifest() -> dict[str, Any]:
    return json.loads((SAMPLES / "manifest.json").read_text(encoding="utf-8"))


def manifest_samples() -> list[dict[str, Any]]:
    return list(load_manifest()["samples"])


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextmanager
def live_server(tmp_path: Path, **settings: Any) -> Iterator[str]:
    """Run ``create_app`` under uvicorn on a free loopback port in a thread; yields the URL.

    ``settings`` are top-level sections for ``load_settings`` (``auth=...``); the server's
    ``public_base_url`` is the URL yielded, so JWT audiences match.
    """
    import uvicorn

    from cds_service.app import create_app
    from cds_service.config import load_settings

    port = free_port()
    url = f"http://127.0.0.1:{port}"
    sections: dict[str, Any] = {
        "server": {"public_base_url": url},
        "storage": {"url": f"sqlite:///{(tmp_path / 'tonicity.db').as_posix()}"},
    }
    sections.update(settings)
    app = create_app(load_settings(None, **sections))
    server = uvicorn.Server(
        uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning", lifespan="on")
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError("test server did not start")
        time.sleep(0.02)
    try:
        yield url
    finally:
        server.should_exit = True
        thread.join(timeout=20)


@pytest.fixture
def samples_dir() -> Path:
    return SAMPLES
