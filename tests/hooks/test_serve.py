"""`tonicity serve`: local-trial rules (auth off only on loopback unless the alarmingly named
flag is given, loud warning, header on every response) and a real start/stop of the server.

Loopback addresses per RFC 1122 §3.2.1.3 / RFC 4291 §2.5.3 (open standards): 127.0.0.0/8, ::1.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from argparse import Namespace
from pathlib import Path

import httpx
import pytest

from cds_service.app import LOCAL_TRIAL_HEADER
from cds_service.cli import main
from cds_service.commands.serve import UNSAFE_FLAG, is_loopback, resolve
from cds_service.errors import UserError


def _args(**kw: object) -> Namespace:
    base: dict[str, object] = {
        "config": None,
        "host": None,
        "port": None,
        "allow_unauthenticated": False,
    }
    base.update(kw)
    return Namespace(**base)


@pytest.mark.parametrize(
    ("host", "loopback"),
    [
        ("127.0.0.1", True),
        ("127.8.9.10", True),
        ("::1", True),
        ("[::1]", True),
        ("localhost", True),
        ("0.0.0.0", False),
        ("10.20.30.40", False),
        ("::", False),
        ("cds.larkspur-valley.example.org", False),
    ],
)
def test_loopback_detection(host: str, loopback: bool) -> None:
    assert is_loopback(host) is loopback


def test_no_config_is_a_local_trial_on_the_default_address() -> None:
    settings, host, port = resolve(_args())
    assert (host, port) == ("127.0.0.1", 8080)
    assert settings.local_trial and not settings.auth.required
    assert settings.storage.url == "sqlite:///tonicity.db"
    assert settings.server.public_base_url == "http://127.0.0.1:8080"


def test_unauthenticated_on_a_public_address_needs_the_flag() -> None:
    with pytest.raises(UserError, match=UNSAFE_FLAG):
        resolve(_args(host="0.0.0.0"))
    settings, host, _ = resolve(_args(host="0.0.0.0", allow_unauthenticated=True))
    assert host == "0.0.0.0" and settings.local_trial


def test_config_with_auth_may_bind_anywhere(tmp_path: Path) -> None:
    jwks = tmp_path / "ehr-jwks.json"
    jwks.write_text('{"keys": []}')
    config = tmp_path / "tonicity.toml"
    config.write_text(
        '[server]\npublic_base_url = "https://cds.larkspur-valley.example.org"\n'
        "[auth]\nrequired = true\n"
        '[[auth.clients]]\nissuer = "https://ehr.larkspur-valley.example.org"\n'
        'jwks_file = "ehr-jwks.json"\n'
    )
    settings, host, port = resolve(_args(config=str(config), host="0.0.0.0", port=9443))
    assert (host, port) == ("0.0.0.0", 9443)
    assert settings.auth.required and not settings.local_trial
    assert settings.server.public_base_url == "https://cds.larkspur-valley.example.org"


def test_refusal_is_one_line_on_the_command_line(capsys) -> None:  # type: ignore[no-untyped-def]
    assert main(["serve", "--host", "10.20.30.40"]) != 0
    err = capsys.readouterr().err
    assert UNSAFE_FLAG in err and len(err.strip().splitlines()) == 1


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def test_serve_runs_warns_and_stops_gracefully(tmp_path: Path) -> None:
    port = _free_port()
    root = Path(__file__).resolve().parents[2]
    env = {**os.environ, "PYTHONPATH": str(root)}
    proc = subprocess.Popen(
        [sys.executable, "-m", "cds_service.cli", "serve", "--port", str(port)],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.monotonic() + 20
        response = None
        while time.monotonic() < deadline:
            try:
                response = httpx.get(f"http://127.0.0.1:{port}/cds-services", timeout=1)
                break
            except httpx.TransportError:
                time.sleep(0.2)
        assert response is not None and response.status_code == 200
        assert response.headers[LOCAL_TRIAL_HEADER].startswith("disabled (local trial")
        assert (tmp_path / "tonicity.db").exists()  # SQLite store in the working folder
    finally:
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=30)
    # uvicorn shuts down gracefully, then re-raises the signal: 130 is the CLI's Ctrl-C status
    assert proc.returncode in (0, 130), err
    assert "AUTHENTICATION IS OFF" in err
    assert "Traceback" not in err


def test_bad_configuration_is_one_line_before_binding(tmp_path: Path, capsys) -> None:  # type: ignore[no-untyped-def]
    config = tmp_path / "tonicity.toml"
    config.write_text(
        f'[storage]\nurl = "sqlite:///{tmp_path / "t.db"}"\n'
        '[auth]\nrequired = true\n[[auth.clients]]\nissuer = "https://ehr.example.org"\n'
    )
    assert main(["serve", "--config", str(config)]) != 0
    err = capsys.readouterr().err
    assert "needs jwks_file" in err and len(err.strip().splitlines()) == 1
    config.write_text('[storage]\nurl = "nonsense"\n')
    assert main(["serve", "--config", str(config)]) != 0
    assert "cannot open the store" in capsys.readouterr().err
