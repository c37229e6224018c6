"""`tonicity inspect`: table and JSON of what was understood; one-line errors for bad files."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from cds_service.cli import main
from tests.fhir.factory import PATIENT_ID, bundle, med_request, observation, patient


@pytest.fixture
def record(tmp_path: Path) -> Path:
    path = tmp_path / "larkspur-record.json"
    path.write_text(
        json.dumps(
            bundle(
                patient(),
                observation("na", "2951-2", 126, unit="mEq/L"),
                observation("glu", "14749-6", 5.5, unit="mmol/L"),
                observation("odd", "2951-2", 12.6, unit="mmol/L"),
                observation("bp", "85354-9", 120, unit="mm[Hg]"),
            )
        )
    )
    return path


def test_table_lists_every_resource(record: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["inspect", str(record), "--now", "2026-11-30T12:00:00Z"]) == 0
    out = capsys.readouterr().out
    assert "Observation/na" in out and "126 mmol/L" in out and "sent 126 mEq/L" in out
    assert "99.088 mg/dL" in out  # 5.5 mmol/L x 180.16 g/mol
    assert "plausible range" in out and "LOINC map" in out
    assert "3 used, 2 ignored" in out


def test_json_output(record: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["inspect", str(record), "--json", "--now", "2026-11-30T12:00:00Z"]) == 0
    data = json.loads(capsys.readouterr().out)
    by_id = {r["resource"]: r for r in data["resources"]}
    assert by_id["Observation/na"]["analyte"] == "sodium" and by_id["Observation/na"]["used"]
    assert by_id["Observation/odd"]["used"] is False
    assert data["used"] == 3


def test_cds_hooks_request_uses_prefetch_and_draft_orders(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    request = {
        "hook": "order-sign",
        "hookInstance": "5b0c2a7e-0000-4000-8000-000000000001",
        "context": {
            "userId": "Practitioner/lvh-rn-12",
            "patientId": PATIENT_ID,
            "draftOrders": bundle(
                med_request("iv1", "D5 1/2NS with 20 mEq/L KCl", status="draft"),
                med_request("iv2", "NS 1000 mL", status="draft"),
            ),
            "selections": ["MedicationRequest/iv1"],
        },
        "prefetch": {"patient": patient(), "sodium": bundle(observation("na", "2951-2", 126))},
    }
    path = tmp_path / "request.json"
    path.write_text(json.dumps(request))
    assert main(["inspect", str(path), "--now", "2026-11-30T12:00:00Z"]) == 0
    out = capsys.readouterr().out
    assert "draft IV fluid" in out and "Observation/na" in out and "Patient/lvh-4471" in out
    iv1, iv2 = (line for line in out.splitlines() if line.startswith("MedicationRequest/iv"))
    assert iv1.rstrip().endswith(" selected") and iv2.rstrip().endswith("not selected")


@pytest.mark.parametrize(
    ("content", "message"),
    [("{not json", "not valid JSON"), ("42", "neither"), ('{"a": 1}', "no resourceType")],
)
def test_bad_files_give_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], content: str, message: str
) -> None:
    path = tmp_path / "bad.json"
    path.write_text(content)
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1


def test_missing_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["inspect", str(tmp_path / "absent.json")]) == 2
    assert "cannot read" in capsys.readouterr().err


def test_bad_now(record: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["inspect", str(record), "--now", "yesterday"]) == 2
    assert "ISO 8601" in capsys.readouterr().err
