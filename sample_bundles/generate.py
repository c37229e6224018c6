"""Write the Larkspur Valley Hospital sample patients, hook requests and manifest.

Everything here is invented: the hospital, the people, the identifiers and the results. The
output is deterministic (fixed reference time, fixed ids, uuid5 hook instances), so running

    python sample_bundles/generate.py

twice gives byte-identical files; ``tests/kit`` checks that the committed files match.

Layout written next to this script:

- ``bundles/<patient>.json``: the patient's record as a FHIR R4 Bundle (type ``collection``).
- ``requests/<patient>-patient-view.json``: a CDS Hooks ``patient-view`` request with the
  service's prefetch filled from that record.
- ``requests/<name>-order-select.json`` / ``-order-sign.json``: order hooks with
  ``context.draftOrders`` (a Bundle of draft MedicationRequests) and, for order-select,
  ``context.selections``.
- ``manifest.json``: per file the hook, the evaluation time, the finding codes it must and must
  not produce, and a one-line story.

Codes: LOINC and UCUM as named in the table below; SNOMED CT, ICD-10-CM and RxNorm codes are
from memory (not checked against the terminology releases); every medication also carries its
generic name as text, which is what a reader relies on.

Expectations follow the finding table of DESIGN.md: Na < 135 mmol/L is hyponatremia; measured
serum osmolality < 275 mOsm/kg hypotonic, 275-295 isotonic, > 295 hypertonic; osmolal gap
(measured - calculated) > 10; urine osmolality < 100 dilute; urine sodium <= 30 low. Calculated
osmolality below is 2 Na + glucose/18 + BUN/2.8 (mg/dL inputs; Dorwart and Chalmers 1975,
from memory), used only to place each invented patient clearly on one side of each threshold.
"""

from __future__ import annotations

import json
import uuid
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
NOW = datetime(2026, 3, 14, 9, 0, tzinfo=UTC)
NOW_ISO = "2026-03-14T09:00:00Z"
NAMESPACE = uuid.UUID("5a1d3c52-8d8c-4f44-9a0e-2f0b3c6d7e81")  # invented, fixes hookInstance
MRN_SYSTEM = "https://larkspurvalley.example.org/fhir/mrn"
UCUM = "http://unitsofmeasure.org"
LOINC = "http://loinc.org"
SNOMED = "http://snomed.info/sct"
ICD10CM = "http://hl7.org/fhir/sid/icd-10-cm"
RXNORM = "http://www.nlm.nih.gov/research/umls/rxnorm"
OBS_CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"

# analyte key -> (LOINC, display, UCUM code, printed unit, category). LOINC codes from memory.
ANALYTES: dict[str, tuple[str, str, str, str, str]] = {
    "na": ("2951-2", "Sodium [Moles/volume] in Serum or Plasma", "mmol/L", "mmol/L", "laboratory"),
    "na_bg": ("2947-0", "Sodium [Moles/volume] in Blood", "mmol/L", "mmol/L", "laboratory"),
    "k": ("2823-3", "Potassium [Moles/volume] in Serum or Plasma", "mmol/L", "mmol/L",
          "laboratory"),
    "glu": ("2345-7", "Glucose [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL", "laboratory"),
    "glu_si": ("14749-6", "Glucose [Moles/volume] in Serum or Plasma", "mmol/L", "mmol/L",
               "laboratory"),
    "bun": ("3094-0", "Urea nitrogen [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL",
            "laboratory"),
    "urea_si": ("22664-7", "Urea [Moles/volume] in Serum or Plasma", "mmol/L", "mmol/L",
                "laboratory"),
    "cr": ("2160-0", "Creatinine [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL",
           "laboratory"),
    "sosm": ("2692-2", "Osmolality of Serum or Plasma", "mosm/kg", "mOsm/kg", "laboratory"),
    "uosm": ("2695-5", "Osmolality of Urine", "mosm/kg", "mOsm/kg", "laboratory"),
    "una": ("2955-3", "Sodium [Moles/volume] in Urine", "mmol/L", "mmol/L", "laboratory"),
    "uk": ("2828-2", "Potassium [Moles/volume] in Urine", "mmol/L", "mmol/L", "laboratory"),
    "tg": ("2571-8", "Triglyceride [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL",
           "laboratory"),
    "tp": ("2885-2", "Protein [Mass/volume] in Serum or Plasma", "g/dL", "g/dL", "laboratory"),
    "ua": ("3084-1", "Urate [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL", "laboratory"),
    "tsh": ("3016-3", "Thyrotropin [Units/volume] in Serum or Plasma", "m[IU]/L", "mIU/L",
            "laboratory"),
    "cort": ("2143-6", "Cortisol [Mass/volume] in Serum or Plasma", "ug/dL", "ug/dL",
             "laboratory"),
    "wt": ("29463-7", "Body weight", "kg", "kg", "vital-signs"),
    "ht": ("8302-2", "Body height", "cm", "cm", "vital-signs"),
    "eth": ("5643-2", "Ethanol [Mass/volume] in Serum or Plasma", "mg/dL", "mg/dL", "laboratory"),
}
SODIUM_KEYS = {"na", "na_bg"}  # the service's "sodium" prefetch key
# The service's other Observation prefetch keys (cds_service/hooks/registry.py LAB_GROUPS);
# a result whose analyte is not listed here goes under "labs".
LAB_PREFETCH_KEYS: dict[str, str] = {
    "sosm": "osmolality",
    "uosm": "urineStudies", "una": "urineStudies", "uk": "urineStudies",
    "tsh": "endocrine", "cort": "endocrine",
    "tg": "solutes", "tp": "solutes", "ua": "solutes",
    "wt": "bodySize", "ht": "bodySize",
}
LAB_KEYS = ("labs", "osmolality", "urineStudies", "endocrine", "solutes", "bodySize")

# Unit strings record systems send that are not UCUM codes (no system, no code).
LEGACY_UNITS: dict[str, str] = {
    "na": "mEq/L", "k": "mEq/L", "una": "mEq/L", "uk": "mEq/L",
    "glu": "mg/dl", "bun": "mg/dl", "cr": "mg/dl",
    "sosm": "mOsm/kg H2O", "uosm": "mOsm/kg H2O",
    "tsh": "uIU/mL", "cort": "mcg/dL",
}

# Problems: key -> (SNOMED CT, ICD-10-CM, display). From memory.
CONDITIONS: dict[str, tuple[str, str, str]] = {
    "vomiting": ("422400008", "R11.10", "Vomiting"),
    "gastroenteritis": ("25374005", "A09", "Gastroenteritis"),
    "alcohol": ("66590003", "F10.20", "Alcohol dependence"),
    "heart_failure": ("84114007", "I50.9", "Heart failure"),
    "t2dm": ("44054006", "E11.65", "Type 2 diabetes mellitus with hyperglycemia"),
    "sclc": ("254632001", "C34.90", "Small cell carcinoma of lung"),
    "pneumonia": ("233604007", "J18.9", "Pneumonia"),
    "polydipsia": ("17173007", "R63.1", "Polydipsia"),
    "depression": ("35489007", "F32.9", "Depressive disorder"),
    "hypertension": ("38341003", "I10", "Essential hypertension"),
    "tbi": ("127295002", "S06.9X0A", "Traumatic brain injury"),
    "hypertriglyceridemia": ("302870006", "E78.1", "Hypertriglyceridemia"),
    "pancreatitis": ("197456007", "K85.90", "Acute pancreatitis"),
    "hip_fracture": ("5913000", "S72.009A", "Fracture of neck of femur"),
    "seizure": ("91175000", "R56.9", "Seizure"),
}

# Medications: key -> (RxNorm ingredient code, generic name, text as ordered). From memory.
MEDICATIONS: dict[str, tuple[str, str, str]] = {
    "hctz": ("5487", "hydrochlorothiazide", "hydrochlorothiazide 25 mg oral tablet, once daily"),
    "sertraline": ("36437", "sertraline", "sertraline 50 mg oral tablet, once daily"),
    "atorvastatin": ("83367", "atorvastatin", "atorvastatin 40 mg oral tablet, at night"),
    "amlodipine": ("17767", "amlodipine", "amlodipine 5 mg oral tablet, once daily"),
    "glargine": ("274783", "insulin glargine", "insulin glargine 100 units/mL, 20 units at night"),
    "mannitol": ("6628", "mannitol", "mannitol 20% intravenous solution, 1 g/kg"),
    "tolvaptan": ("358258", "tolvaptan", "tolvaptan 15 mg oral tablet, once"),
    "kcl": ("8591", "potassium chloride",
            "potassium chloride 20 mmol in 100 mL intravenous solution, over 2 hours"),
}

# Draft IV fluids: key -> (text, NaCl %, dextrose %, volume mL, rate mL/h or None).
FLUIDS: dict[str, tuple[str, float | None, float | None, float, float | None]] = {
    "nacl3": ("sodium chloride 3% intravenous solution, 150 mL bolus over 20 min",
              3.0, None, 150, 450),
    "nacl045": ("sodium chloride 0.45% intravenous solution, 1000 mL at 100 mL/h",
                0.45, None, 1000, 100),
    "nacl09": ("sodium chloride 0.9% intravenous solution, 1000 mL at 125 mL/h",
               0.9, None, 1000, 125),
    "d5w": ("dextrose 5% in water intravenous solution, 1000 mL at 80 mL/h",
            None, 5.0, 1000, 80),
}
RX_SODIUM_CHLORIDE = "9863"  # RxNorm ingredient, from memory
RX_GLUCOSE = "4850"  # RxNorm ingredient (glucose / dextrose), from memory

ALL_CODES = [
    "hyponatremia-tonicity-unknown", "hypotonic-hyponatremia", "isotonic-hyponatremia",
    "hypertonic-hyponatremia", "osmolal-gap-elevated", "dilute-urine", "low-urine-sodium",
    "siadh-pattern", "drug-associated", "endocrine-screen", "correction-rate-exceeded",
    "implausible-result", "out-of-scope", "hypotonic-fluid-order", "isotonic-fluid-order",
    "hypertonic-saline-order", "drug-order-risk", "vaptan-order", "potassium-order",
    "unidentified-order",
]
PATIENT_VIEW_ONLY = ALL_CODES[:10]
ORDER_ONLY = ALL_CODES[13:]
TONICITY = ALL_CODES[:4]
URINE = ["dilute-urine", "low-urine-sodium", "siadh-pattern"]
SERVICE_FOR_HOOK = {
    "patient-view": "sodium-workup",
    "order-select": "sodium-order-select",
    "order-sign": "sodium-order-sign",
}


def iso(t: datetime) -> str:
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def at(hours_before_now: float) -> datetime:
    return NOW - timedelta(hours=hours_before_now)


@dataclass
class Lab:
    key: str
    value: float
    hours_ago: float
    status: str = "final"
    unit: str | None = None  # force a unit string (implausible / unconvertible cases)


@dataclass
class Person:
    slug: str
    pid: str
    mrn: str
    given: str
    family: str
    gender: str
    birth: str
    labs: list[Lab] = field(default_factory=list)
    conditions: list[str] = field(default_factory=list)
    medications: list[str] = field(default_factory=list)
    legacy_units: bool = False


def panel(hours_ago: float, **values: float) -> list[Lab]:
    """Results drawn together (one sample time)."""
    return [Lab(k, v, hours_ago) for k, v in values.items()]


# ---- FHIR resources ------------------------------------------------------------------------


def patient_resource(p: Person) -> dict[str, Any]:
    return {
        "resourceType": "Patient",
        "id": p.pid,
        "identifier": [{
            "use": "usual",
            "type": {"coding": [{
                "system": "http://terminology.hl7.org/CodeSystem/v2-0203", "code": "MR"}]},
            "system": MRN_SYSTEM,
            "value": p.mrn,
        }],
        "name": [{"use": "official", "family": p.family, "given": [p.given]}],
        "gender": p.gender,
        "birthDate": p.birth,
        "managingOrganization": {"display": "Larkspur Valley Hospital"},
    }


def observation(p: Person, n: int, lab: Lab) -> dict[str, Any]:
    loinc, display, ucum, printed, category = ANALYTES[lab.key]
    quantity: dict[str, Any] = {"value": lab.value}
    if lab.unit is not None:
        quantity["unit"] = lab.unit
    elif p.legacy_units and lab.key in LEGACY_UNITS:
        quantity["unit"] = LEGACY_UNITS[lab.key]
    else:
        quantity.update(unit=printed, system=UCUM, code=ucum)
    t = iso(at(lab.hours_ago))
    return {
        "resourceType": "Observation",
        "id": f"{p.pid}-obs-{n:04d}",
        "status": lab.status,
        "category": [{"coding": [{"system": OBS_CATEGORY, "code": category}]}],
        "code": {"coding": [{"system": LOINC, "code": loinc, "display": display}],
                 "text": display},
        "subject": {"reference": f"Patient/{p.pid}"},
        "effectiveDateTime": t,
        "issued": iso(at(lab.hours_ago - 0.75)) if category == "laboratory" else t,
        "valueQuantity": quantity,
    }


def condition(p: Person, key: str) -> dict[str, Any]:
    snomed, icd, display = CONDITIONS[key]
    return {
        "resourceType": "Condition",
        "id": f"{p.pid}-cond-{key.replace('_', '-')}",
        "clinicalStatus": {"coding": [{
            "system": "http://terminology.hl7.org/CodeSystem/condition-clinical",
            "code": "active"}]},
        "verificationStatus": {"coding": [{
            "system": "http://terminology.hl7.org/CodeSystem/condition-ver-status",
            "code": "confirmed"}]},
        "category": [{"coding": [{
            "system": "http://terminology.hl7.org/CodeSystem/condition-category",
            "code": "problem-list-item"}]}],
        "code": {"coding": [
            {"system": SNOMED, "code": snomed, "display": display},
            {"system": ICD10CM, "code": icd, "display": display},
        ], "text": display},
        "subject": {"reference": f"Patient/{p.pid}"},
    }


def medication_request(p: Person, key: str, *, status: str = "active", rid: str | None = None,
                       ) -> dict[str, Any]:
    rx, generic, text = MEDICATIONS[key]
    return {
        "resourceType": "MedicationRequest",
        "id": rid or f"{p.pid}-med-{key}",
        "status": status,
        "intent": "order",
        "medicationCodeableConcept": {
            "coding": [{"system": RXNORM, "code": rx, "display": generic}], "text": text},
        "subject": {"reference": f"Patient/{p.pid}"},
        "authoredOn": iso(at(24 * 20)) if status == "active" else NOW_ISO,
        "dosageInstruction": [{"text": text}],
    }


def fluid_request(p: Person, key: str, rid: str) -> dict[str, Any]:
    text, nacl, dextrose, volume, rate = FLUIDS[key]
    coding = []
    if nacl is not None:
        coding.append({"system": RXNORM, "code": RX_SODIUM_CHLORIDE, "display": "sodium chloride"})
    if dextrose is not None:
        coding.append({"system": RXNORM, "code": RX_GLUCOSE, "display": "glucose"})
    dose_rate: dict[str, Any] = {
        "doseQuantity": {"value": volume, "unit": "mL", "system": UCUM, "code": "mL"}}
    if rate is not None:
        dose_rate["rateQuantity"] = {"value": rate, "unit": "mL/h", "system": UCUM, "code": "mL/h"}
    return {
        "resourceType": "MedicationRequest",
        "id": rid,
        "status": "draft",
        "intent": "order",
        "medicationCodeableConcept": {"coding": coding, "text": text},
        "subject": {"reference": f"Patient/{p.pid}"},
        "authoredOn": NOW_ISO,
        "dosageInstruction": [{
            "text": text,
            "route": {"coding": [{"system": SNOMED, "code": "47625008",
                                  "display": "Intravenous route"}]},
            "doseAndRate": [dose_rate],
        }],
    }


def record(p: Person) -> list[dict[str, Any]]:
    resources = [patient_resource(p)]
    resources += [observation(p, n, lab) for n, lab in enumerate(p.labs, start=1)]
    resources += [condition(p, c) for c in p.conditions]
    resources += [medication_request(p, m) for m in p.medications]
    return resources


def entry(resource: dict[str, Any], mode: str | None = None) -> dict[str, Any]:
    e: dict[str, Any] = {
        "fullUrl": f"urn:uuid:{uuid.uuid5(NAMESPACE, resource['resourceType'] + resource['id'])}",
        "resource": resource,
    }
    if mode:
        e["search"] = {"mode": mode}
    return e


def bundle(resources: Iterable[dict[str, Any]], kind: str, bid: str) -> dict[str, Any]:
    items = list(resources)
    out: dict[str, Any] = {"resourceType": "Bundle", "id": bid, "type": kind}
    if kind == "searchset":
        out["total"] = len(items)
    out["entry"] = [entry(r, "match" if kind == "searchset" else None) for r in items]
    return out


def prefetch(p: Person) -> dict[str, Any]:
    """The service's prefetch filled from the record, as a CDS client would send it.

    Keys mirror ``cds_service/hooks/registry.py`` (``prefetch_templates``); a kit test checks
    that they still match. Observations newest first, as ``_sort=-date`` asks.
    """
    res = record(p)
    obs = sorted((r for r in res if r["resourceType"] == "Observation"),
                 key=lambda r: r["effectiveDateTime"], reverse=True)
    sodium_codes = {ANALYTES[k][0] for k in SODIUM_KEYS}
    sodium = [o for o in obs if o["code"]["coding"][0]["code"] in sodium_codes]
    key_of = {ANALYTES[k][0]: key for k, key in LAB_PREFETCH_KEYS.items()}
    labs: dict[str, list[dict[str, Any]]] = {key: [] for key in LAB_KEYS}
    for o in obs:
        code = o["code"]["coding"][0]["code"]
        if code not in sodium_codes:
            labs[key_of.get(code, "labs")].append(o)
    meds = [r for r in res if r["resourceType"] == "MedicationRequest" and r["status"] == "active"]
    conds = [r for r in res if r["resourceType"] == "Condition"]
    return {
        "patient": res[0],
        "sodium": bundle(sodium, "searchset", f"{p.pid}-sodium"),
        **{key: bundle(found, "searchset", f"{p.pid}-{key.lower()}")
           for key, found in labs.items()},
        "medicationRequests": bundle(meds, "searchset", f"{p.pid}-medreq"),
        "medicationStatements": bundle([], "searchset", f"{p.pid}-medstmt"),
        "conditions": bundle(conds, "searchset", f"{p.pid}-cond"),
    }


def hook_request(p: Person, hook: str, name: str, drafts: Iterable[dict[str, Any]] = (),
                 selections: Iterable[str] = ()) -> dict[str, Any]:
    context: dict[str, Any] = {
        "userId": "Practitioner/lvh-dr-amara-lindqvist",
        "patientId": p.pid,
        "encounterId": f"{p.pid}-enc-1",
    }
    if hook != "patient-view":
        context["draftOrders"] = bundle(drafts, "collection", f"{name}-drafts")
    if hook == "order-select":
        context["selections"] = list(selections)
    return {
        "hookInstance": str(uuid.uuid5(NAMESPACE, name)),
        "hook": hook,
        "context": context,
        "prefetch": prefetch(p),
    }


# ---- the patients -------------------------------------------------------------------------


def people() -> list[Person]:
    out: list[Person] = []

    # 1. Normal sodium: no cards at all.
    out.append(Person(
        "p01-normal-sodium", "lvh-p01", "LVH-000101", "Maya", "Okafor", "female", "1979-05-02",
        labs=panel(5, na=139, k=4.1, glu=96, bun=14, cr=0.8) + panel(30, na=140, k=4.0),
        conditions=["hypertension"], medications=["amlodipine", "atorvastatin"]))

    # 2. Child: one out-of-scope card, nothing computed.
    out.append(Person(
        "p02-child-gastroenteritis", "lvh-p02", "LVH-000102", "Theo", "Brandt", "male",
        "2017-02-11",
        labs=panel(4, na=128, k=3.4, glu=88, bun=22, cr=0.4, sosm=268, wt=27.5),
        conditions=["gastroenteritis"]))

    # 3. Sodium low, osmolality never measured: tonicity unknown, provisional calculation.
    out.append(Person(
        "p03-tonicity-unknown", "lvh-p03", "LVH-000103", "Harold", "Vance", "male", "1951-09-23",
        labs=panel(6, na=129, k=4.2, glu=104, bun=16, cr=1.0, wt=78.0, ht=176),
        conditions=["hip_fracture"], medications=["atorvastatin"]))

    # 4. SI units (glucose and urea in mmol/L), SIADH pattern with a complete screen.
    #    Calculated osmolality 2*127 + 6.0 + 5.0 = 265; measured 270 (gap 5). Read as mg/dL by
    #    mistake the same glucose and urea would give 256 and a gap above 10.
    out.append(Person(
        "p04-siadh-si-units", "lvh-p04", "LVH-000104", "Ingrid", "Solberg", "female",
        "1958-12-07",
        labs=panel(3, na=127, k=3.9, glu_si=6.0, urea_si=5.0, sosm=270, uosm=460, una=62, uk=38,
                   ua=2.9, tsh=1.8, cort=17.0, wt=64.0)
        + panel(27, na=128, k=4.0),
        conditions=["sclc"]))

    # 5. Non-UCUM unit strings (mEq/L, mg/dl, mOsm/kg H2O); hypovolemic after vomiting.
    #    Calculated 2*126 + 102/18 + 30/2.8 = 268.4; measured 266.
    out.append(Person(
        "p05-vomiting-legacy-units", "lvh-p05", "LVH-000105", "Rafael", "Quintero", "male",
        "1966-03-30",
        labs=panel(2, na=126, k=3.2, glu=102, bun=30, cr=1.3, sosm=266, uosm=480, una=12, uk=45,
                   tsh=2.4, cort=21.0),
        conditions=["vomiting"], legacy_units=True))

    # 6. Primary polydipsia: maximally dilute urine, no urine sodium sent.
    out.append(Person(
        "p06-polydipsia-dilute-urine", "lvh-p06", "LVH-000106", "Dorothy", "Pelletier", "female",
        "1972-08-14",
        labs=panel(3, na=124, k=3.7, glu=90, bun=8, cr=0.6, sosm=258, uosm=70, tsh=1.1,
                   cort=12.5, wt=70.0),
        conditions=["polydipsia"]))

    # 7. Thiazide and SSRI: drug-associated hypotonic hyponatremia, screen complete, no urine.
    out.append(Person(
        "p07-thiazide-ssri", "lvh-p07", "LVH-000107", "Eleanor", "Whitcombe", "female",
        "1944-01-19",
        labs=panel(4, na=126, k=3.5, glu=110, bun=18, cr=0.9, sosm=263, tsh=2.9, cort=15.0,
                   wt=58.0),
        conditions=["hypertension", "depression"], medications=["hctz", "sertraline"]))

    # 8. SIADH pattern with the endocrine screen missing (no TSH, no cortisol); profound.
    out.append(Person(
        "p08-siadh-screen-missing", "lvh-p08", "LVH-000108", "Samuel", "Achterberg", "male",
        "1955-06-03",
        labs=panel(2, na=121, k=4.0, glu=98, bun=9, cr=0.7, sosm=254, uosm=520, una=71, wt=81.0,
                   ht=181),
        conditions=["pneumonia"]))

    # 9. Pseudohyponatremia: triglycerides very high, measured osmolality normal.
    out.append(Person(
        "p09-pseudohyponatremia-lipemia", "lvh-p09", "LVH-000109", "Colin", "Marchetti", "male",
        "1983-10-28",
        labs=panel(3, na=127, k=4.3, glu=110, bun=12, cr=0.9, sosm=288, tg=3200, tp=7.1),
        conditions=["hypertriglyceridemia", "pancreatitis"]))

    # 10. Hyperglycemia: hypertonic hyponatremia (translocational). Calc 252 + 40 + 10 = 302.
    out.append(Person(
        "p10-hyperglycemia-hypertonic", "lvh-p10", "LVH-000110", "Beatrice", "Nakamura-Holt",
        "female", "1961-04-09",
        labs=panel(2, na=126, k=5.1, glu=720, bun=28, cr=1.4, sosm=302, wt=92.0),
        conditions=["t2dm"], medications=["glargine"]))

    # 11. Mannitol after head injury: measured 318, calculated 272.4, gap about 46.
    out.append(Person(
        "p11-mannitol-osmolal-gap", "lvh-p11", "LVH-000111", "Desmond", "Farrow", "male",
        "1990-11-15",
        labs=panel(2, na=131, k=3.9, glu=110, bun=12, cr=0.9, sosm=318, wt=84.0),
        conditions=["tbi"], medications=["mannitol"]))

    # 12. A sodium of 13 (typo for 131?) and a potassium in U/L: neither is used.
    out.append(Person(
        "p12-implausible-results", "lvh-p12", "LVH-000112", "Agnes", "Thornbury", "female",
        "1949-07-21",
        labs=panel(5, na=132, glu=101, bun=15, cr=0.9)
        + [Lab("na", 13, 1), Lab("k", 4.1, 5, unit="U/L")]))

    # 13. A low sodium entered in error and a normal result: no cards.
    out.append(Person(
        "p13-entered-in-error", "lvh-p13", "LVH-000113", "Oskar", "Lindgren", "male",
        "1975-02-26",
        labs=panel(6, na=137, k=4.2, glu=92, bun=13, cr=0.9)
        + [Lab("na", 118, 1, status="entered-in-error")]))

    # 14. Overcorrection: 112 -> 124 mmol/L in 20 hours after saline for vomiting, alcohol use.
    out.append(Person(
        "p14-overcorrection", "lvh-p14", "LVH-000114", "Vernon", "Castellanos", "male",
        "1963-05-17",
        labs=panel(21, na=112, k=3.0, glu=95, bun=24, cr=1.1, sosm=238, uosm=410, una=14,
                   tsh=2.2, cort=19.0, wt=66.0, ht=172)
        + panel(16, na=115) + panel(11, na=118) + panel(6, na=121)
        + panel(1, na=124, k=3.6, glu=99, bun=17, cr=0.9),
        conditions=["alcohol", "vomiting"]))

    # 15. Long stay: 40 days of daily chemistry and blood gases, slow fall to 129 mmol/L in
    #     heart failure with low urine sodium (>= 300 Observations).
    long_labs: list[Lab] = []
    for day in range(40, 0, -1):
        base = 24 * day - 18  # a 03:00 draw each day, the last one 6 hours before now
        # steady 138-141 (day-to-day steps of at most 3), then a fall of 2 a day to 129
        na = {5: 137, 4: 135, 3: 133, 2: 131, 1: 129}.get(day, [139, 140, 138, 139, 141, 140,
                                                                138][day % 7])
        long_labs += panel(base, na=na, k=4.0 + (day % 3) / 10, glu=100 + day % 9,
                           bun=18 + day % 5, cr=1.1, wt=82.0 - day / 20)
        if day > 8:
            long_labs += [Lab("na_bg", na - 1, base - 6), Lab("na_bg", na, base - 12)]
    long_labs += panel(2, sosm=268, uosm=310, una=22, uk=30, tsh=3.1, cort=16.0, ht=178)
    out.append(Person(
        "p15-long-stay-heart-failure", "lvh-p15", "LVH-000115", "Winifred", "Ashdown", "female",
        "1947-03-02", labs=long_labs, conditions=["heart_failure"]))

    # --- Classification by effective osmolality, glucose first, urine boundary -------------
    # 16. Kidney failure: measured osmolality 292 is normal, but urea nitrogen 110 mg/dL adds
    #     110/2.8 = 39.3 mOsm/kg of an ineffective osmole: effective 252.7, hypotonic. Urine osm
    #     380 and urine Na 45 give the SIADH pattern, whose renal criterion is not met (eGFR).
    out.append(Person(
        "p16-uremia-effective-hypotonic", "lvh-p16", "LVH-000116", "Gustavo", "Ferreira-Lund",
        "male", "1950-07-30",
        labs=panel(3, na=127, k=5.4, glu=90, bun=110, cr=6.2, sosm=292, uosm=380, una=45,
                   wt=74.0)))

    # 17. Ethanol 250 mg/dL (250/4.6 = 54.3 mOsm/kg) and urea nitrogen 12 (4.3): measured 318,
    #     effective 259.4, hypotonic; calculated 258 + 5.3 + 4.3 + 54.3 = 321.9, no gap. Urine
    #     osmolality 90 (<= 100): relative excess water intake (beer).
    out.append(Person(
        "p17-ethanol-effective-hypotonic", "lvh-p17", "LVH-000117", "Niall", "Drummond", "male",
        "1969-01-12",
        labs=panel(3, na=129, k=3.6, glu=95, bun=12, cr=0.8, sosm=318, eth=250, uosm=90,
                   tsh=2.0, cort=16.0, wt=70.0),
        conditions=["alcohol"]))

    # 18. Glucose 560 mg/dL with Na 119: Hillier 119 + 2.4 x 4.6 = 130.0 (Katz 126.4) is still
    #     low, so hypotonic hyponatremia remains beyond the glucose (effective osmolality 282 - 3.2
    #     = 278.8 would not show it). Urine osm 430, urine Na 58: SIADH pattern; pneumonia.
    out.append(Person(
        "p18-hyperglycemia-residual-hypotonic", "lvh-p18", "LVH-000118", "Marguerite", "Oyelaran",
        "female", "1957-11-03",
        labs=panel(3, na=119, k=4.4, glu=560, bun=9, cr=0.7, sosm=282, uosm=430, una=58,
                   tsh=1.6, cort=18.0, wt=68.0),
        conditions=["t2dm", "pneumonia"], medications=["glargine"]))

    # 19. Urine osmolality exactly 100 mOsm/kg: relative excess water intake (the European
    #     algorithm's boundary is inclusive), and the urine sodium of 25 is not interpreted.
    out.append(Person(
        "p19-urine-osmolality-100", "lvh-p19", "LVH-000119", "Hilde", "Varga", "female",
        "1981-04-22",
        labs=panel(3, na=128, k=3.8, glu=92, bun=7, cr=0.6, sosm=262, uosm=100, una=25,
                   tsh=1.2, cort=16.0, wt=61.0),
        conditions=["polydipsia"]))

    # 20. Seizure with profound chronic hyponatremia (SIADH pattern after pneumonia).
    out.append(Person(
        "p20-seizure-severe-symptoms", "lvh-p20", "LVH-000120", "Lucinda", "Ferreira-Banks",
        "female", "1968-09-12",
        labs=panel(1, na=116, k=3.9, glu=101, bun=9, cr=0.7, sosm=246, uosm=490, una=64,
                   tsh=2.1, cort=18.5, wt=62.0)
        + panel(60, na=121),
        conditions=["seizure", "pneumonia"]))
    return out


# ---- the manifest -------------------------------------------------------------------------


def not_(*allowed: str, among: Iterable[str] = ALL_CODES) -> list[str]:
    return [c for c in among if c not in allowed]


def rest(must: list[str], unasserted: Iterable[str] = ()) -> list[str]:
    skip = set(must) | set(unasserted)
    return [c for c in ALL_CODES if c not in skip]


# slug -> (must, unasserted codes, story) for patient-view. Everything else is must_not.
PATIENT_VIEW: dict[str, tuple[list[str], list[str], str]] = {
    "p01-normal-sodium": (
        [], [], "Na 139 on amlodipine and atorvastatin: a normal sodium gives no cards."),
    "p02-child-gastroenteritis": (
        ["out-of-scope"], [], "Nine-year-old with gastroenteritis, Na 128: one out-of-scope card."),
    "p03-tonicity-unknown": (
        ["hyponatremia-tonicity-unknown"], [],
        "Na 129 after a hip fracture, osmolality never measured: provisional calculation."),
    "p04-siadh-si-units": (
        ["hypotonic-hyponatremia", "siadh-pattern"], [],
        "Lung cancer, SI units: osm 270, urine osm 460, urine Na 62, TSH and cortisol normal."),
    "p05-vomiting-legacy-units": (
        ["hypotonic-hyponatremia", "low-urine-sodium"], [],
        "Vomiting, results in mEq/L, mg/dl and mOsm/kg H2O: hypotonic, urine Na 12."),
    "p06-polydipsia-dilute-urine": (
        ["hypotonic-hyponatremia", "dilute-urine"], [],
        "Polydipsia: Na 124, osm 258, urine osm 70; screen complete."),
    "p07-thiazide-ssri": (
        ["hypotonic-hyponatremia", "drug-associated"], [],
        "Hydrochlorothiazide and sertraline, Na 126, osm 263; no urine studies yet."),
    "p08-siadh-screen-missing": (
        ["hypotonic-hyponatremia", "siadh-pattern", "endocrine-screen"], [],
        "Pneumonia, Na 121, urine osm 520 and Na 71; TSH and cortisol never measured."),
    "p09-pseudohyponatremia-lipemia": (
        ["isotonic-hyponatremia"], ["osmolal-gap-elevated"],
        "Triglycerides 3200 mg/dL, Na 127 with measured osm 288: pseudohyponatremia."),
    "p10-hyperglycemia-hypertonic": (
        ["hypertonic-hyponatremia"], ["drug-associated"],
        "Glucose 720 mg/dL, Na 126, osm 302: hypertonic; corrected sodium is normal."),
    "p11-mannitol-osmolal-gap": (
        ["hypertonic-hyponatremia", "osmolal-gap-elevated"], ["drug-associated"],
        "Mannitol after head injury: measured osm 318 against calculated 272 (gap about 46)."),
    "p12-implausible-results": (
        ["implausible-result", "hyponatremia-tonicity-unknown"], [],
        "A sodium of 13 and a potassium in U/L are set aside; Na 132 is used."),
    "p13-entered-in-error": (
        [], [], "Na 118 marked entered-in-error after a normal 137: ignored, no cards."),
    "p14-overcorrection": (
        ["correction-rate-exceeded", "hypotonic-hyponatremia", "low-urine-sodium"], [],
        "Alcohol use and vomiting: Na 112 -> 124 in 20 hours exceeds the correction limit."),
    "p15-long-stay-heart-failure": (
        ["hypotonic-hyponatremia", "low-urine-sodium"], [],
        "Day 40 of a heart-failure stay, over 300 results: slow fall to Na 129, urine Na 22."),
    "p16-uremia-effective-hypotonic": (
        ["hypotonic-hyponatremia", "siadh-pattern", "endocrine-screen"], [],
        "Kidney failure: measured osm 292 is normal, urea set aside leaves effective 253."),
    "p17-ethanol-effective-hypotonic": (
        ["hypotonic-hyponatremia", "dilute-urine"], [],
        "Ethanol 250 mg/dL: measured osm 318, effective 259 once ethanol and urea are set aside."),
    "p18-hyperglycemia-residual-hypotonic": (
        ["hypotonic-hyponatremia", "siadh-pattern"], ["drug-associated"],
        "Glucose 560, Na 119: corrected Na 130 is still low, worked up as hypotonic (SIADH)."),
    "p19-urine-osmolality-100": (
        ["hypotonic-hyponatremia", "dilute-urine"], [],
        "Urine osm exactly 100 mOsm/kg: relative excess water intake; urine Na 25 not read."),
    "p20-seizure-severe-symptoms": (
        ["hypotonic-hyponatremia", "siadh-pattern"], [],
        "Seizure coded, Na 116 after 121 two days earlier, urine osm 490: severe symptoms."),
}


@dataclass(frozen=True)
class OrderCase:
    name: str
    slug: str  # the patient
    hook: str
    drafts: tuple[tuple[str, str], ...]  # (kind "fluid"|"med", key)
    selected: tuple[int, ...]  # indexes of selected drafts (order-select)
    must: tuple[str, ...]
    story: str
    unasserted: tuple[str, ...] = ()


ORDER_CASES: tuple[OrderCase, ...] = (
    OrderCase(
        "o01-half-saline-select", "p03-tonicity-unknown", "order-select",
        (("fluid", "nacl045"), ("fluid", "nacl09")), (0,),
        ("hypotonic-fluid-order",),
        "0.45% saline selected at Na 129 (0.9% saline drafted but not selected)."),
    OrderCase(
        "o02-hypertonic-saline-select", "p08-siadh-screen-missing", "order-select",
        (("fluid", "nacl3"), ("med", "tolvaptan")), (0,),
        ("hypertonic-saline-order",),
        "3% saline 150 mL bolus selected at Na 121 (tolvaptan drafted, not selected)."),
    OrderCase(
        "o03-vaptan-and-drugs-sign", "p08-siadh-screen-missing", "order-sign",
        (("med", "tolvaptan"), ("med", "sertraline"), ("med", "hctz")), (),
        ("vaptan-order", "drug-order-risk"),
        "Tolvaptan, sertraline and hydrochlorothiazide signed together at Na 121."),
    OrderCase(
        "o04-saline-after-overcorrection-sign", "p14-overcorrection", "order-sign",
        (("fluid", "nacl09"),), (),
        ("correction-rate-exceeded", "isotonic-fluid-order"),
        "More 0.9% saline after Na rose 112 -> 124 in 20 hours."),
    OrderCase(
        "o05-d5w-sign", "p07-thiazide-ssri", "order-sign",
        (("fluid", "d5w"),), (),
        ("hypotonic-fluid-order",),
        "Dextrose 5% in water signed at Na 126."),
    OrderCase(
        "o06-normal-sodium-sign", "p01-normal-sodium", "order-sign",
        (("fluid", "nacl09"), ("med", "sertraline")), (),
        (),
        "0.9% saline and sertraline at Na 139: no cards."),
    OrderCase(
        "o07-child-select", "p02-child-gastroenteritis", "order-select",
        (("fluid", "d5w"), ("fluid", "nacl045")), (0, 1),
        ("out-of-scope",),
        "Child with D5W and 0.45% saline selected: out-of-scope only."),
    OrderCase(
        "o08-d5w-after-overcorrection-sign", "p14-overcorrection", "order-sign",
        (("fluid", "d5w"),), (),
        ("correction-rate-exceeded", "hypotonic-fluid-order"),
        "D5W after Na rose 112 -> 124 in 20 hours: the advised re-lowering, amounts shown."),
    OrderCase(
        "o09-hypertonic-saline-seizure-select", "p20-seizure-severe-symptoms", "order-select",
        (("fluid", "nacl3"),), (0,),
        ("hypertonic-saline-order",),
        "3% saline at Na 116 with a seizure coded: the repeated 150 mL bolus regimen."),
    OrderCase(
        "o10-potassium-sign", "p05-vomiting-legacy-units", "order-sign",
        (("med", "kcl"),), (),
        ("potassium-order",),
        "Potassium chloride at Na 126 and K 3.2: it raises sodium and counts in the limit."),
)


def drafts_for(p: Person, case: OrderCase) -> list[dict[str, Any]]:
    out = []
    for n, (kind, key) in enumerate(case.drafts, start=1):
        rid = f"{case.name}-draft-{n}"
        if kind == "fluid":
            out.append(fluid_request(p, key, rid))
        else:
            out.append(medication_request(p, key, status="draft", rid=rid))
    return out


def dump(path: Path, data: Any) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")


def build() -> dict[Path, Any]:
    """Every file to write, relative to this folder -> JSON content."""
    files: dict[Path, Any] = {}
    manifest: list[dict[str, Any]] = []
    persons = {p.slug: p for p in people()}
    assert set(persons) == set(PATIENT_VIEW), "every patient needs its manifest line"
    for slug, p in persons.items():
        must, unasserted, story = PATIENT_VIEW[slug]
        must_not = rest(must, unasserted)
        bpath = Path("bundles") / f"{slug}.json"
        files[bpath] = bundle(record(p), "collection", f"{p.pid}-record")
        rpath = Path("requests") / f"{slug}-patient-view.json"
        files[rpath] = hook_request(p, "patient-view", f"{slug}-patient-view")
        for path, kind in ((bpath, "bundle"), (rpath, "request")):
            manifest.append({
                "file": path.as_posix(), "kind": kind, "hook": "patient-view",
                "service": SERVICE_FOR_HOOK["patient-view"], "now": NOW_ISO,
                "must": must, "must_not": must_not, "story": story,
            })
    for case in ORDER_CASES:
        p = persons[case.slug]
        drafts = drafts_for(p, case)
        selections = [f"MedicationRequest/{drafts[i]['id']}" for i in case.selected]
        path = Path("requests") / f"{case.name}.json"
        files[path] = hook_request(p, case.hook, case.name, drafts, selections)
        must = list(case.must)
        # Work-up codes belong to patient-view (DESIGN.md table); order hooks must not repeat them.
        manifest.append({
            "file": path.as_posix(), "kind": "request", "hook": case.hook,
            "service": SERVICE_FOR_HOOK[case.hook], "now": NOW_ISO,
            "must": must, "must_not": rest(must, case.unasserted), "story": case.story,
        })
    files[Path("manifest.json")] = {
        "description": (
            "Larkspur Valley Hospital sample patients (invented). Evaluate each file with "
            "`tonicity evaluate FILE --now NOW`; the response must contain a card for every "
            "code in `must` and none for the codes in `must_not`. Codes in neither list are "
            "not asserted. Written by generate.py; do not edit by hand."
        ),
        "now": NOW_ISO,
        "samples": manifest,
    }
    return files


def main() -> None:
    files = build()
    long_stay = files[Path("bundles") / "p15-long-stay-heart-failure.json"]
    n_obs = sum(e["resource"]["resourceType"] == "Observation" for e in long_stay["entry"])
    assert n_obs >= 300, n_obs
    for rel, data in files.items():
        dump(HERE / rel, data)
    print(f"wrote {len(files)} files; long stay has {n_obs} Observations")


if __name__ == "__main__":
    main()
