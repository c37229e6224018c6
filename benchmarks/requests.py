"""Realistic, invented CDS Hooks requests for benchmarks and reliability runs.

The scenario is fictional: an adult inpatient of "Larkspur Valley Hospital" admitted with
profound hyponatremia that rises too fast on the last day, with seven days of chemistry
(serial sodium, glucose, urea nitrogen, creatinine, potassium, serum and urine osmolality,
urine sodium, daily weights), home and inpatient medications and a problem list. Every name,
identifier and value is invented; the LOINC, UCUM, SNOMED CT and RxNorm codes are the open
standards' own (from memory, not checked against the code systems' current releases).

Prefetch is filled from the service's own templates (``cds_service.hooks.registry``) by the
query runner ``tonicity evaluate`` uses for a Bundle (``cds_service.hooks.client``): each
``Observation?code=...`` key gets a searchset Bundle of every matching result, newest first
(``_count`` is a page size, and a client following ``next`` links sends every match), so the
5,000-Observation variant really carries 5,000 Observations.

Run as a module to print one request: ``python -m benchmarks.requests patient-view 200``.
"""

from __future__ import annotations

import json
import random
import sys
import uuid
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from itertools import pairwise
from typing import Any

LOINC = "http://loinc.org"
UCUM = "http://unitsofmeasure.org"
SNOMED = "http://snomed.info/sct"
RXNORM = "http://www.nlm.nih.gov/research/umls/rxnorm"
OBS_CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"
CONDITION_CLINICAL = "http://terminology.hl7.org/CodeSystem/condition-clinical"

PATIENT_ID = "lvh-pt-20417"
PRACTITIONER = "Practitioner/lvh-dr-ossian-teller"
ENCOUNTER_ID = "lvh-enc-88213"


def current_time() -> datetime:
    """The default evaluation time: now, to the minute. The service judges results by their age
    against its own clock, so generated records always end just before the call."""
    return datetime.now(UTC).replace(second=0, microsecond=0)


SERVICE_IDS = {
    "patient-view": "sodium-workup",
    "order-select": "sodium-order-select",
    "order-sign": "sodium-order-sign",
}


@dataclass(frozen=True, slots=True)
class Analyte:
    """One kind of result in the generated record and its share of the Observations."""

    key: str
    loinc: str
    display: str  # LOINC long common name, from memory
    unit: str  # UCUM code
    share: float  # fraction of the generated Observations
    category: str = "laboratory"


ANALYTES: tuple[Analyte, ...] = (
    Analyte("sodium", "2951-2", "Sodium [Moles/volume] in Serum or Plasma", "mmol/L", 0.27),
    Analyte("potassium", "2823-3", "Potassium [Moles/volume] in Serum or Plasma", "mmol/L", 0.20),
    Analyte("glucose", "2345-7", "Glucose [Mass/volume] in Serum or Plasma", "mg/dL", 0.20),
    Analyte("bun", "3094-0", "Urea nitrogen [Mass/volume] in Serum or Plasma", "mg/dL", 0.08),
    Analyte("creatinine", "2160-0", "Creatinine [Mass/volume] in Serum or Plasma", "mg/dL", 0.08),
    Analyte("weight", "29463-7", "Body weight", "kg", 0.05, "vital-signs"),
    Analyte("serum_osm", "2692-2", "Osmolality of Serum or Plasma", "mosm/kg", 0.04),
    Analyte("urine_osm", "2695-5", "Osmolality of Urine", "mosm/kg", 0.04),
    Analyte("urine_na", "2955-3", "Sodium [Moles/volume] in Urine", "mmol/L", 0.04),
)

#: Serum sodium path (days from the first draw, mmol/L): admitted at 121, drifting down to
#: 117 on day five, then a rise of 12 mmol/L within the last day (faster than the usual limits:
#: the correction-rate surveillance should see it) to 129 at the last draw.
_SODIUM_PATH: tuple[tuple[float, float], ...] = (
    (0.0, 121.0),
    (3.0, 119.0),
    (5.0, 117.0),
    (6.0, 117.0),
    (6.9, 129.0),
    (7.0, 129.0),
)


def _sodium_at(day: float) -> float:
    for (d0, v0), (d1, v1) in pairwise(_SODIUM_PATH):
        if day <= d1:
            return v0 + (v1 - v0) * (max(day, d0) - d0) / (d1 - d0)
    return _SODIUM_PATH[-1][1]


def _value(key: str, day: float, rng: random.Random) -> float:
    na = _sodium_at(day)
    match key:
        case "sodium":
            return round(na + rng.uniform(-0.6, 0.6))
        case "potassium":
            return round(rng.uniform(3.5, 4.3), 1)
        case "glucose":
            return float(round(rng.uniform(92, 165)))
        case "bun":
            return float(round(rng.uniform(8, 13)))
        case "creatinine":
            return round(rng.uniform(0.7, 0.9), 2)
        case "weight":
            return round(rng.uniform(67.6, 68.4), 1)
        case "serum_osm":  # 2 Na + glucose/18 + BUN/2.8, plus a small gap
            return float(round(2 * na + 120 / 18 + 10 / 2.8 + rng.uniform(2, 6)))
        case "urine_osm":
            return float(round(rng.uniform(410, 520)))
        case "urine_na":
            return float(round(rng.uniform(48, 72)))
    raise ValueError(f"unknown analyte key {key!r}")


def _counts(n: int) -> dict[str, int]:
    counts = {a.key: max(1, round(a.share * n)) for a in ANALYTES}
    counts["sodium"] += n - sum(counts.values())
    if counts["sodium"] < 1:
        raise ValueError(f"n={n} is too small for the generated record (at least 9)")
    return counts


def observation(
    analyte: Analyte, value: float, when: datetime, ident: str, patient_id: str
) -> dict[str, Any]:
    unit, code = analyte.unit, analyte.unit
    if analyte.key == "sodium" and ident.endswith("7"):
        unit, code = "mEq/L", "meq/L"  # some analysers still report milliequivalents
    return {
        "resourceType": "Observation",
        "id": ident,
        "status": "final",
        "category": [{"coding": [{"system": OBS_CATEGORY, "code": analyte.category}]}],
        "code": {
            "coding": [{"system": LOINC, "code": analyte.loinc, "display": analyte.display}],
            "text": analyte.display,
        },
        "subject": {"reference": f"Patient/{patient_id}"},
        "effectiveDateTime": when.isoformat(),
        "issued": (when + timedelta(minutes=42)).isoformat(),
        "valueQuantity": {"value": value, "unit": unit, "system": UCUM, "code": code},
    }


def observations(
    n: int = 200,
    *,
    now: datetime | None = None,
    span_days: float = 7.0,
    seed: int = 20417,
    patient_id: str = PATIENT_ID,
) -> list[dict[str, Any]]:
    """``n`` Observations spread over the ``span_days`` before ``now`` (oldest first)."""
    now = now or current_time()
    rng = random.Random(seed)
    start = now - timedelta(days=span_days) + timedelta(hours=1)
    out: list[dict[str, Any]] = []
    for analyte in ANALYTES:
        count = _counts(n)[analyte.key]
        step = (span_days - 2 / 24) / count
        for i in range(count):
            # The last result of every analyte belongs to one morning panel an hour ago.
            last = i == count - 1
            day = span_days - 2 / 24 if last else i * step + rng.uniform(0, step * 0.3)
            when = (start + timedelta(days=day)).replace(microsecond=0)
            ident = f"lvh-obs-{analyte.key.replace('_', '-')}-{i:05d}"
            out.append(observation(analyte, _value(analyte.key, day, rng), when, ident, patient_id))
    out.sort(key=lambda o: o["effectiveDateTime"])
    return out


def patient(patient_id: str = PATIENT_ID) -> dict[str, Any]:
    return {
        "resourceType": "Patient",
        "id": patient_id,
        "identifier": [{"system": "urn:oid:2.16.840.1.113883.3.9999.1", "value": "LVH-0020417"}],
        "name": [{"family": "Quenby", "given": ["Marisol"]}],
        "gender": "female",
        "birthDate": "1949-06-02",
    }


def _medication(
    kind: str, ident: str, text: str, rxnorm: str, status: str, patient_id: str, when: datetime
) -> dict[str, Any]:
    res: dict[str, Any] = {
        "resourceType": kind,
        "id": ident,
        "status": status,
        "medicationCodeableConcept": {
            "coding": [{"system": RXNORM, "code": rxnorm}],
            "text": text,
        },
        "subject": {"reference": f"Patient/{patient_id}"},
    }
    if kind == "MedicationRequest":
        res["intent"] = "order"
        res["authoredOn"] = when.isoformat()
    else:
        res["effectivePeriod"] = {"start": when.isoformat()}
    return res


def medication_requests(
    patient_id: str = PATIENT_ID, now: datetime | None = None
) -> list[dict[str, Any]]:
    """Active inpatient orders (RxNorm ingredient codes from memory)."""
    now = now or current_time()
    started = now - timedelta(days=6)
    rows = (
        ("lvh-mr-sertraline", "Sertraline 50 mg oral tablet", "36437"),
        ("lvh-mr-hctz", "Hydrochlorothiazide 25 mg oral tablet", "5487"),
        ("lvh-mr-lisinopril", "Lisinopril 10 mg oral tablet", "29046"),
        ("lvh-mr-heparin", "Heparin 5000 unit/0.5 mL injection", "5224"),
    )
    return [
        _medication("MedicationRequest", i, t, c, "active", patient_id, started) for i, t, c in rows
    ]


def medication_statements(
    patient_id: str = PATIENT_ID, now: datetime | None = None
) -> list[dict[str, Any]]:
    now = now or current_time()
    started = now - timedelta(days=400)
    return [
        _medication(
            "MedicationStatement",
            "lvh-ms-omeprazole",
            "Omeprazole 20 mg oral capsule",
            "7646",
            "active",
            patient_id,
            started,
        )
    ]


def conditions(patient_id: str = PATIENT_ID) -> list[dict[str, Any]]:
    """Problem list (SNOMED CT codes from memory)."""
    rows = (
        ("lvh-cond-htn", "59621000", "Essential hypertension"),
        ("lvh-cond-depression", "35489007", "Depressive disorder"),
        ("lvh-cond-pneumonia", "233604007", "Pneumonia"),
    )
    return [
        {
            "resourceType": "Condition",
            "id": ident,
            "clinicalStatus": {"coding": [{"system": CONDITION_CLINICAL, "code": "active"}]},
            "code": {"coding": [{"system": SNOMED, "code": code, "display": text}], "text": text},
            "subject": {"reference": f"Patient/{patient_id}"},
        }
        for ident, code, text in rows
    ]


def _fluid(
    ident: str, text: str, volume_ml: float, rate_ml_h: float, patient_id: str, now: datetime
) -> dict[str, Any]:
    return {
        "resourceType": "MedicationRequest",
        "id": ident,
        "status": "draft",
        "intent": "order",
        "medicationCodeableConcept": {
            "coding": [{"system": RXNORM, "code": "9863", "display": "sodium chloride"}],
            "text": text,
        },
        "subject": {"reference": f"Patient/{patient_id}"},
        "authoredOn": now.isoformat(),
        "dosageInstruction": [
            {
                "text": f"{text}, {rate_ml_h:g} mL/h intravenously",
                "route": {
                    "coding": [
                        {"system": SNOMED, "code": "47625008", "display": "Intravenous route"}
                    ]
                },
                "doseAndRate": [
                    {
                        "rateQuantity": {
                            "value": rate_ml_h,
                            "unit": "mL/h",
                            "system": UCUM,
                            "code": "mL/h",
                        }
                    }
                ],
            }
        ],
        "dispenseRequest": {
            "quantity": {"value": volume_ml, "unit": "mL", "system": UCUM, "code": "mL"}
        },
    }


def draft_orders(patient_id: str = PATIENT_ID, now: datetime | None = None) -> list[dict[str, Any]]:
    """Three drafts: 3% saline, 0.45% saline and sertraline (RxNorm codes from memory)."""
    now = now or current_time()
    sertraline = _medication(
        "MedicationRequest",
        "lvh-draft-sertraline",
        "Sertraline 50 mg oral tablet",
        "36437",
        "draft",
        patient_id,
        now,
    )
    sertraline["dosageInstruction"] = [{"text": "50 mg by mouth once daily"}]
    return [
        _fluid("lvh-draft-nacl3", "Sodium chloride 3% injection, 500 mL", 500, 30, patient_id, now),
        _fluid(
            "lvh-draft-nacl045",
            "Sodium chloride 0.45% injection, 1000 mL",
            1000,
            75,
            patient_id,
            now,
        ),
        sertraline,
    ]


def service_templates() -> dict[str, str]:
    """The services' prefetch templates (key -> FHIR query)."""
    from cds_service.hooks.registry import prefetch_templates

    return dict(prefetch_templates())


def fill_prefetch(
    templates: Mapping[str, str], context: Mapping[str, Any], record: Sequence[Mapping[str, Any]]
) -> dict[str, Any]:
    """Answer each template from ``record`` as a FHIR server would (every match, no paging),
    with the same query runner ``tonicity evaluate`` uses for a Bundle."""
    from cds_service.hooks.client import run_query
    from cds_service.hooks.registry import fill

    resources = [dict(r) for r in record]
    return {key: run_query(fill(t, dict(context)), resources) for key, t in templates.items()}


def record(
    n_observations: int = 200,
    *,
    now: datetime | None = None,
    seed: int = 20417,
    patient_id: str = PATIENT_ID,
) -> list[dict[str, Any]]:
    """The patient's whole record: Patient, Observations, medications, problems."""
    now = now or current_time()
    return [
        patient(patient_id),
        *observations(n_observations, now=now, seed=seed, patient_id=patient_id),
        *medication_requests(patient_id, now),
        *medication_statements(patient_id, now),
        *conditions(patient_id),
    ]


def hook_request(
    hook: str,
    n_observations: int = 200,
    *,
    now: datetime | None = None,
    seed: int = 20417,
    patient_id: str = PATIENT_ID,
    templates: Mapping[str, str] | None = None,
    fhir_server: str | None = None,
    prefetch: bool = True,
) -> dict[str, Any]:
    """A complete CDS Hooks request for ``hook`` (patient-view, order-select or order-sign)."""
    now = now or current_time()
    from cds_service.hooks.client import build_request

    if hook not in SERVICE_IDS:
        raise ValueError(f"hook must be one of {sorted(SERVICE_IDS)}, not {hook!r}")
    resources = record(n_observations, now=now, seed=seed, patient_id=patient_id)
    drafts = draft_orders(patient_id, now) if hook != "patient-view" else None
    body = build_request(
        {
            "resourceType": "Bundle",
            "type": "collection",
            "entry": [{"resource": r} for r in resources],
        },
        hook,
        drafts,
    )
    body["hookInstance"] = str(uuid.UUID(int=random.Random(seed).getrandbits(128)))
    body["context"].update(userId=PRACTITIONER, encounterId=ENCOUNTER_ID)
    if templates is not None:
        body["prefetch"] = fill_prefetch(templates, body["context"], resources)
    if not prefetch:
        del body["prefetch"]
    if fhir_server:
        body["fhirServer"] = fhir_server
        body["fhirAuthorization"] = {
            "access_token": "lvh-bench-token-not-secret",
            "token_type": "Bearer",
            "expires_in": 300,
            "scope": (  # SMART App Launch 2.0.0 scopes (v2 form) for every read
                "patient/Patient.r patient/Observation.rs patient/MedicationRequest.rs "
                "patient/MedicationStatement.rs patient/Condition.rs"
            ),
            "subject": "tonicity-bench",
        }
    return body


def patient_view_request(n_observations: int = 200, **kwargs: Any) -> dict[str, Any]:
    return hook_request("patient-view", n_observations, **kwargs)


def order_select_request(n_observations: int = 200, **kwargs: Any) -> dict[str, Any]:
    return hook_request("order-select", n_observations, **kwargs)


def count_observations(body: Mapping[str, Any]) -> int:
    """How many distinct Observations a request's prefetch carries."""
    seen: set[str] = set()
    for value in (body.get("prefetch") or {}).values():
        if isinstance(value, dict) and value.get("resourceType") == "Bundle":
            for entry in value.get("entry", []):
                res = entry.get("resource", {})
                if res.get("resourceType") == "Observation":
                    seen.add(res["id"])
    return len(seen)


def feedback_body(
    cards: Iterable[Mapping[str, Any]],
    when: datetime | None = None,
) -> dict[str, Any]:
    """CDS Hooks 2.0 feedback for ``cards``: accepts the first suggestion when there is one,
    overrides with the card's first override reason when there is one, else 'overridden'
    with a comment only."""
    moment = (when or datetime.now(UTC)).isoformat()
    items: list[dict[str, Any]] = []
    for card in cards:
        item: dict[str, Any] = {"card": card["uuid"], "outcomeTimestamp": moment}
        suggestions = card.get("suggestions") or []
        reasons = card.get("overrideReasons") or []
        if suggestions and suggestions[0].get("uuid"):
            item["outcome"] = "accepted"
            item["acceptedSuggestions"] = [{"id": suggestions[0]["uuid"]}]
        else:
            item["outcome"] = "overridden"
            override: dict[str, Any] = {"userComment": "Reviewed on the ward round (bench)."}
            if reasons:
                override["reason"] = reasons[0]
            item["overrideReason"] = override
        items.append(item)
    return {"feedback": items}


def main(argv: list[str] | None = None) -> int:
    args = argv if argv is not None else sys.argv[1:]
    hook = args[0] if args else "patient-view"
    n = int(args[1]) if len(args) > 1 else 200
    json.dump(hook_request(hook, n), sys.stdout, indent=1)
    sys.stdout.write("\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
