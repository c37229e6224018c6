"""Fixtures for the web tests: an invented Larkspur Valley Hospital patient, built directly as a
ClinicalContext and Findings so these tests do not depend on the FHIR layer or the clinical core.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from cds_service.clinical.context import (
    Analyte,
    ClinicalContext,
    DraftFluid,
    LabResult,
    MedicationEntry,
    PatientFacts,
    Sex,
)
from cds_service.clinical.findings import Finding, FindingCode, InputUsed, Urgency, Value, ValueName
from cds_service.config import Settings
from cds_service.store import Store
from cds_service.web import create_router

NOW = datetime(2026, 3, 14, 9, 30, tzinfo=UTC)
T0 = NOW - timedelta(hours=40)

#: Hours after T0 and sodium values (mmol/L); one preliminary, one whole-blood result.
SODIUM = [
    (0, 118.0, False, False),
    (6, 121.0, True, False),
    (14, 125.0, False, True),
    (22, 129.0, False, False),
    (34, 131.0, False, False),
]


def lab(analyte: Analyte, hours: float, value: float, n: int, **kw: bool) -> LabResult:
    return LabResult(
        analyte=analyte,
        value=value,
        time=T0 + timedelta(hours=hours),
        source_id=f"Observation/lv-{analyte}-{n}",
        raw=f"{value}",
        **kw,
    )


def make_context(sodium: list[tuple[float, float, bool, bool]] = SODIUM) -> ClinicalContext:
    na = tuple(
        lab(Analyte.SODIUM, h, v, i, preliminary=p, direct_ise=d)
        for i, (h, v, p, d) in enumerate(sodium)
    )
    osm = (lab(Analyte.OSMOLALITY, 1, 252.0, 0),)
    uosm = (lab(Analyte.URINE_OSMOLALITY, 2, 430.0, 0),)
    una = (lab(Analyte.URINE_SODIUM, 2, 48.0, 0),)
    return ClinicalContext(
        now=NOW,
        patient=PatientFacts(patient_id="lvh-pt-0042", age_years=71, sex=Sex.FEMALE),
        series={
            Analyte.SODIUM: na,
            Analyte.OSMOLALITY: osm,
            Analyte.URINE_OSMOLALITY: uosm,
            Analyte.URINE_SODIUM: una,
        },
        current={Analyte.SODIUM: na[-1]} if na else {},
        medications=(
            MedicationEntry(
                names=("hydrochlorothiazide",),
                rxnorm=("5487",),
                display="Hydrochlorothiazide 25 mg tablet",
                status="active",
                kind="MedicationRequest",
                source_id="MedicationRequest/lv-hctz",
                start=T0 - timedelta(hours=8),
            ),
            MedicationEntry(
                names=("sodium chloride",),
                rxnorm=(),
                display="Sodium chloride 3% infusion",
                status="completed",
                kind="MedicationAdministration",
                source_id="MedicationAdministration/lv-hts",
                start=T0 + timedelta(hours=3),
            ),
            MedicationEntry(
                names=("paracetamol",),
                rxnorm=(),
                display="Paracetamol",
                status="active",
                kind="MedicationStatement",
                source_id="MedicationStatement/lv-apap",
                start=None,
            ),
        ),
        draft_fluids=(DraftFluid(resource_id="MedicationRequest/lv-d5w", display="Dextrose 5%"),),
    )


def make_findings() -> list[Finding]:
    return [
        Finding(
            code=FindingCode.CORRECTION_RATE,
            urgency=Urgency.CRITICAL,
            summary="Sodium rose 11 mmol/L in 24 h, above the 10 mmol/L limit",
            values=(
                Value(ValueName.SODIUM_CHANGE_24H, 11.0),
                Value(ValueName.CORRECTION_LIMIT_24H, 10.0),
            ),
        ),
        Finding(
            code=FindingCode.DRUG_ASSOCIATED,
            urgency=Urgency.WARNING,
            summary="Hydrochlorothiazide is associated with hyponatremia",
            inputs=(
                InputUsed(
                    label="Hydrochlorothiazide 25 mg tablet",
                    value="active",
                    unit="",
                    source_id="MedicationRequest/lv-hctz",
                ),
            ),
        ),
        Finding(
            code=FindingCode.HYPOTONIC,
            urgency=Urgency.WARNING,
            summary="Hypotonic hyponatremia <script>alert(1)</script>",
            values=(
                Value(ValueName.SERUM_SODIUM, 131.0),
                Value(ValueName.MEASURED_OSMOLALITY, 252.0),
                Value(ValueName.SEVERITY, "profound"),
            ),
        ),
    ]


SAMPLE_REQUEST = {
    "hook": "patient-view",
    "hookInstance": "d1577c69-dfbe-44ad-ba6d-3e05e953b2ea",
    "context": {"userId": "Practitioner/lv-dr-1", "patientId": "lvh-pt-0042"},
    "prefetch": {},
}


SAMPLE_NOW = "2026-03-14T09:00:00Z"


def write_samples(folder: Path) -> Path:
    """A small sample folder shaped like sample_bundles/: manifest, a request, a Bundle, and
    files that must never be served (one unlisted, one listed outside the folder)."""
    (folder / "requests").mkdir(parents=True, exist_ok=True)
    (folder / "requests" / "lv-request.json").write_text(json.dumps(SAMPLE_REQUEST))
    bundle = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [
            {
                "resource": {
                    "resourceType": "Patient",
                    "id": "lvh-pt-0042",
                    "birthDate": "1955-03-20",
                }
            },
            {
                "resource": {
                    "resourceType": "Observation",
                    "id": "lv-na-1",
                    "status": "final",
                    "subject": {"reference": "Patient/lvh-pt-0042"},
                    "effectiveDateTime": "2026-03-14T06:00:00Z",
                    "code": {"coding": [{"system": "http://loinc.org", "code": "2951-2"}]},
                }
            },
        ],
    }
    (folder / "lv-bundle.json").write_text(json.dumps(bundle))
    (folder / "unlisted.json").write_text("{}")
    manifest = {
        "now": SAMPLE_NOW,
        "samples": [
            {
                "file": "requests/lv-request.json",
                "kind": "request",
                "hook": "patient-view",
                "story": "Confused after a long run",
            },
            {
                "file": "lv-bundle.json",
                "kind": "bundle",
                "hook": "patient-view",
                "story": "A Bundle of one patient",
            },
            {
                "file": "../outside.json",
                "kind": "request",
                "hook": "patient-view",
                "story": "must never be listed",
            },
        ],
    }
    (folder / "manifest.json").write_text(json.dumps(manifest))
    (folder.parent / "outside.json").write_text(json.dumps(SAMPLE_REQUEST))
    return folder


def make_app(store: Store, sample_dir: Path | None, settings: Settings | None = None) -> FastAPI:
    app = FastAPI()
    app.include_router(create_router())
    app.state.store = store
    app.state.settings = settings or Settings(local_trial=True)
    app.state.sample_dir = sample_dir
    return app


@pytest.fixture
def client(store: Store, tmp_path: Path) -> TestClient:
    return TestClient(make_app(store, write_samples(tmp_path / "samples")))
