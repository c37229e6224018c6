"""What an operations engineer meets (issue 14, operator experience): a busy port, the start
line, log formats, key ids and the commands printed for them, offline API docs, metrics on
an internal port."""

from __future__ import annotations

import logging
import re
import shlex
import socket
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient

from cds_service import logs, ops
from cds_service.app import create_app
from cds_service.cli import main
from cds_service.commands import keys

from ._support import open_client, trial_settings


def _busy_port() -> socket.socket:
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    s.listen(1)
    return s


def test_a_busy_port_is_one_line_and_exit_2(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.chdir(tmp_path)
    with _busy_port() as taken:
        port = taken.getsockname()[1]
        assert main(["serve", "--port", str(port)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1, err
    assert err.startswith(f"tonicity serve: cannot serve on 127.0.0.1:{port}: the port is in use")


def test_a_busy_metrics_port_is_one_line_too(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.chdir(tmp_path)
    with _busy_port() as taken:
        monkeypatch.setenv("TONICITY_SERVER__METRICS_PORT", str(taken.getsockname()[1]))
        with socket.socket() as free:
            free.bind(("127.0.0.1", 0))
            port = free.getsockname()[1]
        assert main(["serve", "--port", str(port)]) == 2
    err = capsys.readouterr().err
    assert "cannot serve /metrics on 127.0.0.1" in err and "in use" in err


def test_logs_are_text_for_people_and_json_for_collectors(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    log = logging.getLogger("tonicity.test")
    for fmt, pattern in (
        ("text", r"^\d\d:\d\d:\d\d INFO    tonicity\.test: started port=8080$"),
        ("json", r'^\{"time": .*"event": "started".*"port": 8080\}$'),
        ("auto", r'^\{"time": '),  # stderr is captured here, not a terminal: JSON
    ):
        settings = trial_settings(tmp_path, logging={"format": fmt, "level": "INFO"})
        logs.configure_logging(settings)
        logs.log_event(log, "started", port=8080)
        line = capsys.readouterr().err.strip().splitlines()[-1]
        assert re.match(pattern, line), (fmt, line)
    logging.getLogger().handlers.clear()


def test_generated_key_ids_never_start_with_a_dash(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    """RFC 7638 thumbprints are base64url (RFC 4648 section 5): one in 64 starts with '-'.
    The first key here is given such a thumbprint; a new key replaces it."""
    real = keys.public_jwk
    calls = {"n": 0}

    def first_dashed(key, alg, kid=None):  # type: ignore[no-untyped-def]
        jwk = real(key, alg, kid)
        calls["n"] += 1
        if calls["n"] == 1 and kid is None:
            jwk["kid"] = "-" + jwk["kid"][1:]
        return jwk

    monkeypatch.setattr(keys, "public_jwk", first_dashed)
    out_dir = tmp_path / "keys with space"
    assert main(["keys", "generate", "--out-dir", str(out_dir)]) == 0
    assert calls["n"] == 2
    printed = capsys.readouterr().out
    kid = re.search(r"^kid: (\S+)", printed, re.M).group(1)  # type: ignore[union-attr]
    assert not kid.startswith("-")
    command = printed.split("test token: ", 1)[1].strip()
    argv = shlex.split(command)  # the printed command is one shell command, quoted
    assert argv[argv.index("--key") + 1] == str(out_dir / f"{kid}.private.pem")
    assert argv[argv.index("--kid") + 1] == kid


def test_a_kid_starting_with_a_dash_is_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["keys", "generate", "--out-dir", str(tmp_path), "--kid=-rf"]) == 2
    assert "not starting with '-'" in capsys.readouterr().err


def test_api_docs_are_served_from_the_package(tmp_path: Path) -> None:
    with open_client(trial_settings(tmp_path)) as client:
        page = client.get("/docs")
        assert page.status_code == 200
        urls = re.findall(r"""(?:src|href)=["']([^"']+)""", page.text)
        assert urls and all(u.startswith("/") for u in urls), urls  # nothing from a CDN
        assert "cdn" not in page.text.lower()
        for url in urls:
            asset = client.get(url)
            assert asset.status_code == 200 and len(asset.content) > 300, url
        assert client.get("/docs-assets/index.html").status_code == 404
        assert client.get("/openapi.json").status_code == 200


def test_metrics_on_their_own_port_only(tmp_path: Path) -> None:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    settings = trial_settings(tmp_path, server={"metrics_port": port})
    with TestClient(create_app(settings)) as client:
        assert client.get("/metrics").status_code == 404
    server = ops.start_metrics_server("127.0.0.1", port)
    try:
        r = httpx.get(f"http://127.0.0.1:{port}/metrics", timeout=10)
        assert r.status_code == 200 and "tonicity_requests" in r.text
    finally:
        server.shutdown()
        server.server_close()


def test_metrics_port_must_differ_from_the_service_port(tmp_path: Path) -> None:
    from cds_service.errors import UserError

    with pytest.raises(UserError, match="must differ"):
        trial_settings(tmp_path, server={"port": 9000, "metrics_port": 9000})
