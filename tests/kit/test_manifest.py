"""Every sample through `tonicity evaluate` with the manifest's fixed --now (DESIGN.md contract).

The expectations come from the DESIGN.md finding table (re-derived from the raw numbers in
test_samples.py); here the real command must meet them: a card for every `must` code, none for
a `must_not` code, at most one card per code, and the card shape DESIGN.md promises.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from cds_service.cli import main
from cds_service.clinical.findings import FindingCode

from .conftest import SAMPLES, manifest_samples

REPO = SAMPLES.parent
SAMPLES_LIST = manifest_samples()


def _args(sample: dict[str, Any]) -> list[str]:
    args = ["evaluate", str(SAMPLES / sample["file"]), "--now", sample["now"]]
    if sample["kind"] == "bundle":
        args += ["--hook", sample["hook"]]
    return args


def _check(sample: dict[str, Any], response: dict[str, Any]) -> None:
    cards = response["cards"]
    codes = [c["source"]["topic"]["code"] for c in cards]
    assert len(codes) == len(set(codes)), f"more than one card per code: {codes}"
    got = set(codes)
    missing = set(sample["must"]) - got
    unexpected = set(sample["must_not"]) & got
    assert not missing and not unexpected, (
        f"{sample['file']}: missing {sorted(missing)}, unexpected {sorted(unexpected)}; "
        f"story: {sample['story']}"
    )
    for card in cards:  # the card shape of DESIGN.md's CDS Hooks contract
        assert card["uuid"] and len(card["summary"]) < 140
        assert card["indicator"] in ("info", "warning", "critical")
        assert card["source"]["label"] == "Tonicity"
        assert card["source"]["topic"]["code"] in {c.value for c in FindingCode}


@pytest.mark.parametrize("sample", SAMPLES_LIST, ids=lambda s: s["file"])
def test_sample_meets_its_manifest_line(sample: dict[str, Any], capsys: Any) -> None:
    rc = main(_args(sample))
    out, err = capsys.readouterr()
    assert rc == 0, err
    _check(sample, json.loads(out))


def test_normal_sodium_gives_exactly_no_cards(capsys: Any) -> None:
    """DESIGN.md: a normal serum sodium gives {"cards": []} on patient-view."""
    sample = next(s for s in SAMPLES_LIST if s["file"] == "bundles/p01-normal-sodium.json")
    assert main(_args(sample)) == 0
    assert json.loads(capsys.readouterr().out) == {"cards": []}


def test_evaluate_in_a_real_process_matches_the_manifest() -> None:
    """The installed entry point, as an integrator runs it (one subprocess, the overcorrection
    request: the sample that needs the fixed --now most)."""
    name = "requests/p14-overcorrection-patient-view.json"
    sample = next(s for s in SAMPLES_LIST if s["file"] == name)
    done = subprocess.run(
        [sys.executable, "-m", "cds_service.cli", *_args(sample)],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    _check(sample, json.loads(done.stdout))


def test_evaluate_refuses_a_missing_sample_with_one_line(tmp_path: Path) -> None:
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "cds_service.cli",
            "evaluate",
            str(tmp_path / "absent.json"),
            "--now",
            "2026-03-14T09:00:00Z",
        ],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode != 0
    assert len(done.stderr.strip().splitlines()) == 1 and "Traceback" not in done.stderr
