"""No cards although the record has a low sodium, or no usable sodium: the reason is given,
and ``inspect`` and ``evaluate`` agree on what is in use at a given time.

Sources: DESIGN.md command-line contract (``evaluate`` prints exactly the response body on
stdout; messages go to stderr); CDS Hooks 2.0.1, "CDS Service Response" (no decision support:
an empty ``cards`` array). The lookback of a result is the service's own rule
(``fhir/data/lookback.toml``): common practice.
"""

from __future__ import annotations

import json
import re
from datetime import datetime, timedelta
from pathlib import Path

import pytest

from cds_service.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "sample_bundles"
MANIFEST = json.loads((SAMPLES / "manifest.json").read_text())
SAMPLE_NOW = MANIFEST["now"]
BUNDLES = sorted(str(p) for p in (SAMPLES / "bundles").glob("*.json"))
LOW_SODIUM = str(SAMPLES / "bundles" / "p04-siadh-si-units.json")
NORMAL = str(SAMPLES / "bundles" / "p01-normal-sodium.json")
LATE = "2026-06-01T00:00:00Z"  # months after every sample's results


def _evaluate(capsys, path: str, now: str) -> tuple[dict, str]:  # type: ignore[no-untyped-def]
    assert main(["evaluate", path, "--now", now]) == 0
    out = capsys.readouterr()
    return json.loads(out.out), out.err


def _inspect(capsys, path: str, now: str) -> dict:  # type: ignore[no-untyped-def]
    assert main(["inspect", path, "--json", "--now", now]) == 0
    return json.loads(capsys.readouterr().out)


def test_stale_low_sodium_says_why_and_which_now_it_needs(capsys) -> None:  # type: ignore[no-untyped-def]
    body, err = _evaluate(capsys, LOW_SODIUM, LATE)
    assert body == {"cards": []}  # stdout is exactly the response body
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "older than the sodium lookback" in lines[0]
    hint = re.search(r"--now (\S+)$", lines[0])
    assert hint, lines[0]
    again, err = _evaluate(capsys, LOW_SODIUM, hint.group(1))  # the hint works
    assert again["cards"] and not err


def test_no_sodium_at_the_evaluation_time_says_so(capsys) -> None:  # type: ignore[no-untyped-def]
    body, err = _evaluate(capsys, LOW_SODIUM, "2020-01-01T00:00:00Z")  # before every result
    assert body == {"cards": []}
    assert err.count("\n") == 1 and "no usable sodium" in err


def test_normal_sodium_is_quiet_by_design(capsys) -> None:  # type: ignore[no-untyped-def]
    body, err = _evaluate(capsys, NORMAL, SAMPLE_NOW)
    assert body == {"cards": []} and err == ""


def test_workbench_gets_the_same_reason(client) -> None:  # type: ignore[no-untyped-def]
    from cds_service.hooks.client import build_request

    request = build_request(json.loads(Path(LOW_SODIUM).read_text()), "patient-view")
    understood = client.post("/workbench/understand", json=request)
    assert understood.status_code == 200
    assert "older than the sodium lookback" in understood.json()["reason"]
    response = client.post("/cds-services/sodium-workup", json=request)
    assert response.json() == {"cards": []}  # the samples are dated in the past


def _serum_sodium(body: dict) -> set[float]:
    return {
        v["value"]
        for c in body["cards"]
        for v in c.get("extension", {}).get("tonicity.values", [])
        if v["name"] == "serum_sodium"
    }


@pytest.mark.parametrize("path", BUNDLES, ids=[Path(b).stem for b in BUNDLES])
@pytest.mark.parametrize("now", [SAMPLE_NOW, LATE])
def test_inspect_and_evaluate_agree_on_the_sodium_in_use(capsys, path: str, now: str) -> None:  # type: ignore[no-untyped-def]
    """Law: the sodium a card shows is the one ``inspect`` reports in use at the same
    ``--now``; with none in use no card shows a sodium, and no cards come with the reason
    ``inspect`` gives too (a child's out-of-scope card needs no sodium)."""
    report = _inspect(capsys, path, now)
    body, err = _evaluate(capsys, path, now)
    in_use = report["in_use"].get("sodium")
    if in_use is None:
        assert not _serum_sodium(body)
        if not body["cards"]:
            assert err and report["no_sodium"] in err
        return
    shown = _serum_sodium(body)
    assert shown <= {in_use["value"]}
    used = {line["resource"] for line in report["resources"] if line["used"]}
    assert in_use["resource"] in used
    when = datetime.fromisoformat(in_use["time"])
    assert when <= datetime.fromisoformat(now.replace("Z", "+00:00")) + timedelta(0)
