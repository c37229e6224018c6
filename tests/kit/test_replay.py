"""`tonicity replay` against a server started in the test (uvicorn on a free loopback port)."""

from __future__ import annotations

import json
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.cli import main
from cds_service.hooks.timeshift import shift_times

from .conftest import SAMPLES, free_port, live_server, load_manifest

ISSUER = "https://ehr.larkspurvalley.example.org"


def _subset(tmp_path: Path, files: list[str], **change: Any) -> Path:
    """A sample folder holding only these manifest lines (optionally with changed fields)."""
    folder = tmp_path / "samples"
    manifest = load_manifest()
    chosen = [dict(s, **change) for s in manifest["samples"] if s["file"] in files]
    assert len(chosen) == len(files)
    for s in chosen:
        (folder / s["file"]).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(SAMPLES / s["file"], folder / s["file"])
    (folder / "manifest.json").write_text(json.dumps(dict(manifest, samples=chosen)))
    return folder


THREE = [
    "bundles/p08-siadh-screen-missing.json",
    "requests/p14-overcorrection-patient-view.json",
    "requests/o03-vaptan-and-drugs-sign.json",
]


def test_replay_of_every_sample_matches_the_manifest(tmp_path: Path, capsys: Any) -> None:
    """The integrator's acceptance test, on a local trial server (no authentication)."""
    with live_server(tmp_path, auth={"required": False}) as url:
        rc = main(["replay", str(SAMPLES), "--url", url])
    out, err = capsys.readouterr()
    assert rc == 0, out
    samples = load_manifest()["samples"]
    assert f"[{len(samples)}/{len(samples)}]" in err  # progress on stderr
    table = out.splitlines()
    assert table[0].split()[:5] == ["file", "service", "status", "cards", "ms"]
    for s in samples:
        row = next(line for line in table if line.startswith(s["file"] + " "))
        assert " 200 " in row and row.rstrip().endswith("ok")
        for code in s["must"]:
            assert code in row
    assert f"{len(samples)} matched, 0 failed, 0 skipped" in table[-1]


def test_replay_signs_a_fresh_token_per_call(tmp_path: Path, capsys: Any) -> None:
    keys = tmp_path / "keys"
    assert main(["keys", "generate", "--out-dir", str(keys)]) == 0  # kid: the thumbprint
    capsys.readouterr()
    (private,) = keys.glob("*.private.pem")
    (jwks,) = keys.glob("*.jwks.json")
    client = {"issuer": ISSUER, "jwks_file": str(jwks)}
    folder = _subset(tmp_path, THREE)
    with live_server(tmp_path, auth={"required": True, "clients": [client]}) as url:
        replay = ["replay", str(folder), "--url", url]
        rc = main([*replay, "--key", str(private), "--issuer", ISSUER])
        out, err = capsys.readouterr()
        assert rc == 0, out + err
        assert "3 matched, 0 failed" in out
        # The same deployment refuses a caller without a token: one line, exit 2.
        rc = main(replay)
        out, err = capsys.readouterr()
        assert rc == 2
        assert len(err.strip().splitlines()) == 1 and "401" in err
        # and a token signed by another key under the registered kid
        other = tmp_path / "other"
        kid = private.name.removesuffix(".private.pem")
        main(["keys", "generate", "--out-dir", str(other), "--kid", kid])
        capsys.readouterr()
        other_key = str(other / f"{kid}.private.pem")
        rc = main([*replay, "--key", other_key, "--issuer", ISSUER, "--kid", kid])
        assert rc == 2 and "401" in capsys.readouterr().err


def test_replay_reports_a_mismatch_and_exits_one(tmp_path: Path, capsys: Any) -> None:
    folder = _subset(
        tmp_path,
        ["requests/p01-normal-sodium-patient-view.json"],
        must=["out-of-scope"],
        must_not=[],
    )
    with live_server(tmp_path, auth={"required": False}) as url:
        rc = main(["replay", str(folder), "--url", url])
    out, err = capsys.readouterr()
    assert rc == 1
    assert "missing out-of-scope" in out and "MISMATCH" in err
    assert "0 matched, 1 failed" in out


def test_replay_reports_an_unknown_service(tmp_path: Path, capsys: Any) -> None:
    folder = _subset(
        tmp_path, ["requests/p01-normal-sodium-patient-view.json"], service="sodium-nonexistent"
    )
    with live_server(tmp_path, auth={"required": False}) as url:
        rc = main(["replay", str(folder), "--url", url])
    assert rc == 1
    assert "service sodium-nonexistent not offered" in capsys.readouterr().out


def test_unreachable_url_is_one_line(capsys: Any) -> None:
    url = f"http://127.0.0.1:{free_port()}"  # nothing listens there
    rc = main(["replay", str(SAMPLES), "--url", url, "--timeout", "3"])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("tonicity replay: cannot reach") and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--url", "ftp://x"], "not an http(s) URL"),
        (["--url", "http://127.0.0.1:9", "--key", "absent.pem", "--issuer", "x"], "cannot read"),
        (["--url", "http://127.0.0.1:9", "--key", "absent.pem"], "--issuer is required"),
    ],
)
def test_bad_arguments_are_one_line(args: list[str], message: str, capsys: Any) -> None:
    assert main(["replay", str(SAMPLES), *args]) == 2
    err = capsys.readouterr().err
    assert message in err and len(err.strip().splitlines()) == 1


def test_missing_manifest_is_one_line(tmp_path: Path, capsys: Any) -> None:
    assert main(["replay", str(tmp_path), "--url", "http://127.0.0.1:9"]) == 2
    assert "manifest.json" in capsys.readouterr().err


# ---- moving a sample's timeline to the deployment's clock ----------------------------------

instants = st.datetimes(
    min_value=datetime(2000, 1, 1), max_value=datetime(2090, 1, 1), timezones=st.just(UTC)
)
deltas = st.timedeltas(min_value=timedelta(days=-3000), max_value=timedelta(days=3000))


def _z(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


@given(a=instants, b=instants, d=deltas)
def test_shift_keeps_intervals_and_undoes(a: datetime, b: datetime, d: timedelta) -> None:
    """Round trip and invariance laws: shifting by d then -d is the identity, and the time
    between any two results is unchanged (so rates and lookbacks are preserved)."""
    a, b = a.replace(microsecond=0), b.replace(microsecond=0)
    doc = {
        "effectiveDateTime": _z(a),
        "issued": _z(b),
        "text": "2026-03-14T09:00:00Z note",
        "list": [{"authoredOn": _z(a)}],
    }
    moved = shift_times(doc, d)
    assert shift_times(moved, -d) == doc
    ta = datetime.fromisoformat(moved["effectiveDateTime"].replace("Z", "+00:00"))
    tb = datetime.fromisoformat(moved["issued"].replace("Z", "+00:00"))
    assert ta - tb == a - b and ta - a == d
    assert moved["text"] == doc["text"]  # free text is never touched


def test_shift_moves_birth_date_by_whole_days_and_keeps_offsets() -> None:
    doc = {"birthDate": "2017-02-11", "t": "2026-03-14T09:00:00+02:00", "id": "2026-03-14"}
    moved = shift_times(doc, timedelta(days=262, hours=5))
    assert moved["birthDate"] == "2017-10-31"
    assert moved["t"] == "2026-12-01T14:00:00+02:00"
    assert moved["id"] == "2026-03-14"  # only birthDate is a date to move
