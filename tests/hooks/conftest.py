"""Fixtures for the hooks tests: settings, the ASGI app, and stand-ins for modules other
engineers are still writing (installed only while the real module cannot be imported)."""

from __future__ import annotations

import hashlib
import importlib
import sys
import types
from collections.abc import Iterator
from datetime import date
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
from fastapi.testclient import TestClient

from cds_service.clinical.context import (
    Analyte,
    ClinicalContext,
    DraftFluid,
    LabResult,
    PatientFacts,
)
from cds_service.clinical.findings import Finding, FindingCode, Urgency, Value, ValueName
from cds_service.config import Settings, load_settings


def _missing(module: str, attr: str | None = None) -> bool:
    try:
        mod = importlib.import_module(module)
    except ImportError:
        return True
    return attr is not None and not hasattr(mod, attr)


# --- stand-ins -----------------------------------------------------------------------------


def _flatten(resources: Any) -> Iterator[dict]:
    for r in resources:
        if not isinstance(r, dict):
            continue
        if r.get("resourceType") == "Bundle":
            yield from _flatten(e.get("resource") for e in r.get("entry") or [])
        else:
            yield r


def _fake_build_context(
    resources, *, now, settings, patient_id=None, draft_orders=(), selections=()
):  # type: ignore[no-untyped-def]
    from datetime import datetime

    from cds_service.fhir.loinc import lookup

    series: dict[Analyte, list[LabResult]] = {}
    age = None
    for r in _flatten(resources):
        if r["resourceType"] == "Patient" and r.get("birthDate"):
            born = date.fromisoformat(r["birthDate"])
            age = (now.date() - born).days / 365.25
        if r["resourceType"] == "Observation":
            entry = lookup(r["code"]["coding"][0]["code"])
            if entry is None:
                continue
            t = datetime.fromisoformat(r["effectiveDateTime"])
            q = r["valueQuantity"]
            series.setdefault(entry.analyte, []).append(
                LabResult(
                    entry.analyte,
                    float(q["value"]),
                    t,
                    f"Observation/{r['id']}",
                    f"{q['value']} {q['unit']}",
                )
            )
    ser = {a: tuple(sorted(v, key=lambda x: x.time)) for a, v in series.items()}
    fluids = tuple(
        DraftFluid(
            resource_id=f"MedicationRequest/{d['id']}",
            display=d["medicationCodeableConcept"]["text"],
            nacl_percent=0.45,
            selected=not selections or f"MedicationRequest/{d['id']}" in selections,
        )
        for d in draft_orders
        if d.get("resourceType") == "MedicationRequest"
    )
    ctx = ClinicalContext(
        now=now,
        patient=PatientFacts(patient_id, age),
        series=ser,
        current={a: v[-1] for a, v in ser.items()},
        draft_fluids=fluids,
    )
    return SimpleNamespace(context=ctx, report=())


def _fake_workup(ctx: ClinicalContext, th: object) -> list[Finding]:
    if ctx.patient.age_years is not None and ctx.patient.age_years < 18:
        return [Finding(FindingCode.OUT_OF_SCOPE, Urgency.INFO, "Patient under 18 years")]
    na = ctx.current.get(Analyte.SODIUM)
    if na is None or na.value >= 135:
        return []
    values = (Value(ValueName.SERUM_SODIUM, na.value),)
    if Analyte.OSMOLALITY not in ctx.current:
        return [
            Finding(
                FindingCode.TONICITY_UNKNOWN,
                Urgency.CRITICAL if na.value < 125 else Urgency.WARNING,
                f"Sodium {na.value:g} mmol/L; serum osmolality not measured",
                values=values,
                missing=("osmolality", "urine_osmolality", "urine_sodium"),
            )
        ]
    return [
        Finding(FindingCode.HYPOTONIC, Urgency.WARNING, "Hypotonic hyponatremia", values=values)
    ]


def _fake_orders(ctx: ClinicalContext, th: object) -> list[Finding]:
    na = ctx.current.get(Analyte.SODIUM)
    out = []
    for f in ctx.draft_fluids:
        if f.selected and na is not None and na.value < 135:
            out.append(
                Finding(
                    FindingCode.HYPOTONIC_FLUID_ORDER,
                    Urgency.WARNING,
                    "Hypotonic fluid drafted while sodium is low",
                    remove_draft=f.resource_id,
                )
            )
    return out


def _fake_service_request(analyte: Analyte, patient_id: str, reason: str) -> dict:
    from cds_service.fhir.loinc import primary_code

    code, display = primary_code(analyte)
    return {
        "resourceType": "ServiceRequest",
        "status": "draft",
        "intent": "proposal",
        "code": {"coding": [{"system": "http://loinc.org", "code": code, "display": display}]},
        "subject": {"reference": f"Patient/{patient_id}"},
        "reasonCode": [{"text": reason}],
    }


def _install(name: str, **attrs: Any) -> None:
    module = types.ModuleType(name)
    module.__dict__.update(attrs)
    sys.modules[name] = module
    parent, _, child = name.rpartition(".")
    setattr(importlib.import_module(parent), child, module)


if _missing("cds_service.fhir", "build_context"):
    import cds_service.fhir as _fhir

    _fhir.build_context = _fake_build_context  # type: ignore[attr-defined]
if _missing("cds_service.clinical.engine"):
    _install(
        "cds_service.clinical.engine", evaluate_workup=_fake_workup, evaluate_orders=_fake_orders
    )
if _missing("cds_service.fhir.builders"):
    _install("cds_service.fhir.builders", service_request=_fake_service_request)
if _missing("cds_service.logs"):
    _install(
        "cds_service.logs",
        hash_patient_id=lambda salt, pid: hashlib.sha256(f"{salt}:{pid}".encode()).hexdigest(),
        audit=lambda **kw: None,
        configure_logging=lambda settings: None,
    )


# --- fixtures ------------------------------------------------------------------------------


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    """Local-trial settings with a throwaway SQLite store."""
    return load_settings(
        None,
        storage={"url": f"sqlite:///{tmp_path / 'hooks.db'}"},
        auth={"required": False},
        local_trial=True,
        server={
            "public_base_url": "https://cds.larkspur-valley.example.org",
            "max_body_bytes": 4096 * 64,
        },
    )


@pytest.fixture
def client(settings: Settings) -> Iterator[TestClient]:
    from cds_service.app import create_app

    with TestClient(create_app(settings), raise_server_exceptions=False) as c:
        yield c


@pytest.fixture
def thresholds() -> object:
    from cds_service.clinical.thresholds import load_thresholds

    return load_thresholds({})
