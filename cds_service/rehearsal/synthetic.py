"""A deterministic synthetic FHIR Bulk Data export of the fictional Larkspur Valley Hospital.

Everything is invented. The same arguments always give byte-identical files::

    python -m cds_service.rehearsal.synthetic OUT_DIR --patients 2000 [--days 90] [--seed 7]

writes one NDJSON file per resource type (Observation split into several files, as Bulk Data
servers do; Observation and MedicationRequest gzip-compressed, the others plain), and
``_planted.json``: the correction-limit breaches planted on purpose (patient, window, limit
set, whether an order card could warn first) and any malformed lines asked for with
``--malformed``, so that tests and benchmarks know what the rehearsal must find.

Mix (per patient, drawn from a seeded generator): about 22 % hyponatremic (mild, moderate,
profound; some acquired in hospital), the rest normal; daily or twice-daily chemistry panels
during an inpatient stay of 1-10 days; serum osmolality and urine studies after the first low
result at varying delays or never; home medications (some associated with hyponatremia), IV
fluid orders with their administrations, in-hospital drug orders, problems (some resolved
during the stay), a few minors and a few implausible results. Apart from the planted ones no
serial sodium rises faster than 4 mmol/L in 24 h or 7 mmol/L in 48 h, below every limit
Tonicity applies (8-10 mmol/L per 24 h, 16-18 per 48 h), so the planted breaches are all
there is to find. Codes are the ones the sample bundles use (LOINC, SNOMED CT, ICD-10-CM,
RxNorm; the non-LOINC ones from memory).
"""

from __future__ import annotations

import argparse
import gzip
import random
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import IO, Any

import orjson

from cds_service.fhir.loinc import LOINC_SYSTEM as LOINC
from cds_service.fhir.medications import RXNORM_SYSTEM as RXNORM

START = datetime(2026, 1, 1, tzinfo=UTC)
UCUM = "http://unitsofmeasure.org"
SNOMED = "http://snomed.info/sct"
ICD10CM = "http://hl7.org/fhir/sid/icd-10-cm"
OBS_CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"
CLINICAL = "http://terminology.hl7.org/CodeSystem/condition-clinical"
ENCOUNTER_CLASS = "http://terminology.hl7.org/CodeSystem/v3-ActCode"
PLANTED_FILE = "_planted.json"

# key -> (LOINC, display, UCUM, category): the sample bundles' table (LOINC from memory).
LABS: dict[str, tuple[str, str, str, str]] = {
    "na": ("2951-2", "Sodium [Moles/volume] in Serum or Plasma", "mmol/L", "laboratory"),
    "k": ("2823-3", "Potassium [Moles/volume] in Serum or Plasma", "mmol/L", "laboratory"),
    "glu": ("2345-7", "Glucose [Mass/volume] in Serum or Plasma", "mg/dL", "laboratory"),
    "bun": ("3094-0", "Urea nitrogen [Mass/volume] in Serum or Plasma", "mg/dL", "laboratory"),
    "cr": ("2160-0", "Creatinine [Mass/volume] in Serum or Plasma", "mg/dL", "laboratory"),
    "sosm": ("2692-2", "Osmolality of Serum or Plasma", "mosm/kg", "laboratory"),
    "uosm": ("2695-5", "Osmolality of Urine", "mosm/kg", "laboratory"),
    "una": ("2955-3", "Sodium [Moles/volume] in Urine", "mmol/L", "laboratory"),
    "tsh": ("3016-3", "Thyrotropin [Units/volume] in Serum or Plasma", "m[IU]/L", "laboratory"),
    "cort": ("2143-6", "Cortisol [Mass/volume] in Serum or Plasma", "ug/dL", "laboratory"),
    "wt": ("29463-7", "Body weight", "kg", "vital-signs"),
}
# key -> (SNOMED CT, ICD-10-CM, display), from memory.
PROBLEMS: dict[str, tuple[str, str, str]] = {
    "hypertension": ("38341003", "I10", "Essential hypertension"),
    "heart_failure": ("84114007", "I50.9", "Heart failure"),
    "cirrhosis": ("19943007", "K74.60", "Cirrhosis of liver"),
    "pneumonia": ("233604007", "J18.9", "Pneumonia"),
    "vomiting": ("422400008", "R11.10", "Vomiting"),
    "t2dm": ("44054006", "E11.9", "Type 2 diabetes mellitus"),
    "alcohol": ("66590003", "F10.20", "Alcohol dependence"),
    "hip_fracture": ("5913000", "S72.009A", "Fracture of neck of femur"),
}
# key -> (RxNorm ingredient, text as ordered), from memory.
DRUGS: dict[str, tuple[str, str]] = {
    "hctz": ("5487", "hydrochlorothiazide 25 mg oral tablet, once daily"),
    "sertraline": ("36437", "sertraline 50 mg oral tablet, once daily"),
    "omeprazole": ("7646", "omeprazole 20 mg oral capsule, once daily"),
    "amlodipine": ("17767", "amlodipine 5 mg oral tablet, once daily"),
    "atorvastatin": ("83367", "atorvastatin 40 mg oral tablet, at night"),
    "tolvaptan": ("358258", "tolvaptan 15 mg oral tablet, once"),
}
# key -> (text, RxNorm ingredients, volume mL, rate mL/h, hours running).
FLUIDS: dict[str, tuple[str, tuple[str, ...], float, float, float]] = {
    "nacl09": (
        "sodium chloride 0.9% intravenous solution, 1000 mL at 125 mL/h",
        ("9863",),
        1000,
        125,
        8,
    ),
    "nacl045": (
        "sodium chloride 0.45% intravenous solution, 1000 mL at 100 mL/h",
        ("9863",),
        1000,
        100,
        10,
    ),
    "d5w": (
        "dextrose 5% in water intravenous solution, 1000 mL at 80 mL/h",
        ("4850",),
        1000,
        80,
        12,
    ),
    "nacl3": (
        "sodium chloride 3% intravenous solution, 150 mL bolus over 20 min",
        ("9863",),
        150,
        450,
        1,
    ),
}


def iso(t: datetime) -> str:
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


@dataclass
class Planted:
    patient: str
    window_hours: int  # the window whose limit the rise exceeds: 24 or 48
    limit_set: str  # "standard" or "high-risk"
    warned: bool  # an order card (hypertonic or isotonic saline) precedes the breach


@dataclass
class _Writer:
    """One output file per resource type; Observations rolled over every ``per_file`` lines."""

    folder: Path
    per_file: int
    handles: dict[str, IO[bytes]] = field(default_factory=dict)
    lines: dict[str, int] = field(default_factory=dict)
    chunk: int = 1
    names: dict[str, str] = field(default_factory=dict)

    def _name(self, kind: str) -> str:
        if kind == "Observation":
            return f"Observation.{self.chunk:03d}.ndjson.gz"
        return f"{kind}.ndjson.gz" if kind == "MedicationRequest" else f"{kind}.ndjson"

    def _open(self, kind: str) -> IO[bytes]:
        handle = self.handles.get(kind)
        if handle is None:
            name = self._name(kind)
            raw = (self.folder / name).open("wb")
            if name.endswith(".gz"):  # mtime 0 and no name in the header: byte-identical output
                handle = gzip.GzipFile(
                    filename="", mode="wb", fileobj=raw, mtime=0, compresslevel=1
                )
                handle._tonicity_raw = raw  # type: ignore[attr-defined]
            else:
                handle = raw
            self.handles[kind] = handle
            self.lines[kind] = 0
            self.names[kind] = name
        return handle

    def write(self, resource: dict[str, Any]) -> None:
        kind = resource["resourceType"]
        if kind == "Observation" and self.lines.get(kind, 0) >= self.per_file:
            self._close(kind)
            self.chunk += 1
        self._open(kind).write(orjson.dumps(resource) + b"\n")
        self.lines[kind] += 1

    def write_raw(self, kind: str, raw: bytes) -> tuple[str, int]:
        """A line as given (a malformed one); returns (file name, line number)."""
        self._open(kind).write(raw + b"\n")
        self.lines[kind] += 1
        return self.names[kind], self.lines[kind]

    def _close(self, kind: str) -> None:
        handle = self.handles.pop(kind)
        handle.close()
        raw = getattr(handle, "_tonicity_raw", None)
        if raw is not None:
            raw.close()

    def close(self) -> None:
        for kind in list(self.handles):
            self._close(kind)


@dataclass
class _Patient:
    """What is being generated for one patient (resources go straight to the writer)."""

    pid: str
    rng: random.Random
    emit: Callable[[dict[str, Any]], None]
    n: int = 0

    def next_id(self, what: str) -> str:
        self.n += 1
        return f"{self.pid}-{what}-{self.n:03d}"

    def subject(self) -> dict[str, str]:
        return {"reference": f"Patient/{self.pid}"}

    def lab(self, key: str, value: float | str, t: datetime) -> None:
        code, display, unit, category = LABS[key]
        quantity: dict[str, Any] = {"value": value, "unit": unit, "system": UCUM, "code": unit}
        issued = t + timedelta(minutes=45) if category == "laboratory" else t
        self.emit(
            {
                "resourceType": "Observation",
                "id": self.next_id("obs"),
                "status": "final",
                "category": [{"coding": [{"system": OBS_CATEGORY, "code": category}]}],
                "code": {
                    "coding": [{"system": LOINC, "code": code, "display": display}],
                    "text": display,
                },
                "subject": self.subject(),
                "effectiveDateTime": iso(t),
                "issued": iso(issued),
                "valueQuantity": quantity,
            }
        )

    def panel(self, t: datetime, na: float, k: float, glucose: float = 0.0) -> None:
        rng = self.rng
        self.lab("na", na, t)
        self.lab("k", k, t)
        self.lab("glu", glucose or rng.randint(80, 140), t)
        self.lab("bun", rng.randint(8, 24), t)
        self.lab("cr", round(rng.uniform(0.6, 1.3), 1), t)

    def problem(self, key: str, recorded: datetime, resolved: datetime | None = None) -> None:
        snomed, icd, display = PROBLEMS[key]
        res: dict[str, Any] = {
            "resourceType": "Condition",
            "id": self.next_id("cond"),
            "clinicalStatus": {
                "coding": [{"system": CLINICAL, "code": "resolved" if resolved else "active"}]
            },
            "code": {
                "coding": [
                    {"system": SNOMED, "code": snomed, "display": display},
                    {"system": ICD10CM, "code": icd, "display": display},
                ],
                "text": display,
            },
            "subject": self.subject(),
            "recordedDate": iso(recorded),
        }
        if resolved:
            res["abatementDateTime"] = iso(resolved)
        self.emit(res)

    def drug(self, key: str, authored: datetime, until: datetime | None) -> None:
        rx, label = DRUGS[key]
        res: dict[str, Any] = {
            "resourceType": "MedicationRequest",
            "id": self.next_id("med"),
            "status": "completed" if until else "active",
            "intent": "order",
            "medicationCodeableConcept": {
                "coding": [{"system": RXNORM, "code": rx, "display": label.split()[0]}],
                "text": label,
            },
            "subject": self.subject(),
            "authoredOn": iso(authored),
            "dosageInstruction": [{"text": label}],
        }
        if until:
            res["dispenseRequest"] = {"validityPeriod": {"start": iso(authored), "end": iso(until)}}
        self.emit(res)

    def fluid(self, key: str, authored: datetime) -> None:
        label, ingredients, volume, rate, hours = FLUIDS[key]
        rid = self.next_id("iv")
        end = authored + timedelta(hours=hours)
        self.emit(
            {
                "resourceType": "MedicationRequest",
                "id": rid,
                "status": "completed",
                "intent": "order",
                "medicationCodeableConcept": {
                    "coding": [{"system": RXNORM, "code": c} for c in ingredients],
                    "text": label,
                },
                "subject": self.subject(),
                "authoredOn": iso(authored),
                "dosageInstruction": [
                    {
                        "text": label,
                        "route": {
                            "coding": [
                                {
                                    "system": SNOMED,
                                    "code": "47625008",
                                    "display": "Intravenous route",
                                }
                            ]
                        },
                        "doseAndRate": [
                            {
                                "doseQuantity": {
                                    "value": volume,
                                    "unit": "mL",
                                    "system": UCUM,
                                    "code": "mL",
                                },
                                "rateQuantity": {
                                    "value": rate,
                                    "unit": "mL/h",
                                    "system": UCUM,
                                    "code": "mL/h",
                                },
                            }
                        ],
                    }
                ],
                "dispenseRequest": {"validityPeriod": {"start": iso(authored), "end": iso(end)}},
            }
        )
        self.emit(
            {
                "resourceType": "MedicationAdministration",
                "id": self.next_id("adm"),
                "status": "completed",
                "medicationCodeableConcept": {"text": label},
                "subject": self.subject(),
                "effectivePeriod": {
                    "start": iso(authored + timedelta(minutes=20)),
                    "end": iso(end),
                },
                "request": {"reference": f"MedicationRequest/{rid}"},
            }
        )


def _patient_resource(pid: str, rng: random.Random, admitted: datetime, minor: bool) -> dict:
    age = rng.randint(10, 17) if minor else int(rng.triangular(18, 97, 70))
    born = admitted.date().replace(year=admitted.year - age - 1) + timedelta(
        days=rng.randint(1, 360)
    )
    return {
        "resourceType": "Patient",
        "id": pid,
        "identifier": [
            {"system": "https://larkspurvalley.example.org/fhir/mrn", "value": f"LVH-S{pid[-7:]}"}
        ],
        "gender": rng.choice(["female", "male"]),
        "birthDate": born.isoformat(),
        "managingOrganization": {"display": "Larkspur Valley Hospital"},
    }


def _sodium_path(rng: random.Random, kind: str) -> tuple[float, float, float, bool]:
    """(first value, rise per day, ceiling, acquired in hospital) for a non-planted patient."""
    if kind == "normal":
        return rng.randint(137, 142), 0.0, 0.0, False
    band = rng.random()
    if band < 0.60:
        first = rng.randint(130, 134)
    elif band < 0.88:
        first = rng.randint(125, 129)
    else:
        first = rng.randint(114, 124)
    return first, rng.uniform(0.5, 3.0), rng.randint(136, 139), rng.random() < 0.3


def _work_up(p: _Patient, first_low: datetime, profound: bool) -> None:
    rng = p.rng
    r = rng.random()
    if r < 0.8:
        delay = rng.uniform(0, 12) if r < 0.6 else rng.uniform(12, 72)
        p.lab(
            "sosm",
            rng.randint(255, 272) if rng.random() < 0.9 else rng.randint(276, 290),
            first_low + timedelta(hours=delay),
        )
    r = rng.random()
    if r < 0.7:
        t = first_low + timedelta(hours=rng.uniform(0, 24) if r < 0.5 else rng.uniform(24, 96))
        p.lab("uosm", rng.randint(60, 600), t)
        p.lab("una", rng.randint(8, 90), t)
    if rng.random() < 0.5 or profound:
        t = first_low + timedelta(hours=rng.uniform(2, 30))
        p.lab("tsh", round(rng.uniform(0.5, 4.0), 1), t)
        p.lab("cort", round(rng.uniform(8, 22), 1), t)


def _planted(p: _Patient, which: int, t0: datetime) -> tuple[Planted, datetime, float]:
    """A planted overcorrection starting at ``t0``; the last draw's time and sodium."""
    rng = p.rng
    if which == 0:  # 24-h standard limit (10): 12-14 within 20 h; half after hypertonic saline
        first = rng.randint(116, 122)
        steps = [(0, first), (6, first + 4), (12, first + 8), (20, first + rng.randint(12, 14))]
        warned = rng.random() < 0.5
        if warned:
            p.fluid("nacl3", t0 + timedelta(hours=1.5))
        planted = Planted(p.pid, 24, "standard", warned)
    elif which == 1:  # 24-h high-risk limit (8, alcohol use disorder): 9-10 within 20 h
        first = rng.randint(118, 124)
        steps = [(0, first), (8, first + 4), (20, first + rng.randint(9, 10))]
        p.problem("alcohol", t0 - timedelta(days=200))
        warned = rng.random() < 0.5
        if warned:
            p.fluid("nacl09", t0 + timedelta(hours=1.5))
        planted = Planted(p.pid, 24, "high-risk", warned)
    else:  # 48-h standard limit (18): 9 then 10 in two 22-h steps, each 24 h within 10
        first = rng.randint(117, 122)
        steps = [(0, first), (22, first + 9), (44, first + 19)]
        planted = Planted(p.pid, 48, "standard", False)
    for hours, na in steps:
        p.panel(t0 + timedelta(hours=hours), na, round(rng.uniform(3.8, 4.6), 1))
    p.lab("sosm", first * 2 + 8, t0 + timedelta(hours=1))
    return planted, t0 + timedelta(hours=steps[-1][0]), steps[-1][1]


def _one_patient(
    i: int, seed: int, days: int, planted_every: int, emit: Callable[[dict[str, Any]], None]
) -> Planted | None:
    rng = random.Random(seed * 1_000_003 + i)
    pid = f"lvh-s{i:07d}"
    p = _Patient(pid, rng, emit)
    stay = timedelta(hours=rng.choice([24, 36, 48, 60, 72, 96, 120, 168, 240]) + rng.randint(0, 11))
    latest = max(0.0, (timedelta(days=days) - stay - timedelta(days=2)).total_seconds())
    admitted = START + timedelta(days=1, seconds=rng.uniform(0, latest) // 60 * 60)
    discharged = admitted + stay
    plants = bool(planted_every) and i % planted_every == planted_every // 2
    # a few minors (the service makes no adult calculation for them), never a planted
    # breach: the live service would not report one for a child, so it could not be found
    minor = rng.random() < 0.01 and not plants
    emit(_patient_resource(pid, rng, admitted, minor))
    emit(
        {
            "resourceType": "Encounter",
            "id": p.next_id("enc"),
            "status": "finished",
            "class": {"system": ENCOUNTER_CLASS, "code": "IMP", "display": "inpatient encounter"},
            "subject": p.subject(),
            "period": {"start": iso(admitted), "end": iso(discharged)},
            "serviceProvider": {"display": "Larkspur Valley Hospital"},
        }
    )
    for key, share in (
        ("hctz", 0.15),
        ("sertraline", 0.10),
        ("omeprazole", 0.15),
        ("amlodipine", 0.3),
        ("atorvastatin", 0.3),
    ):
        if rng.random() < share:
            p.drug(key, admitted - timedelta(days=rng.randint(30, 900)), None)
    for key, share in (("hypertension", 0.35), ("t2dm", 0.15), ("hip_fracture", 0.05)):
        if rng.random() < share:
            p.problem(key, admitted - timedelta(days=rng.randint(10, 3000)))
    if rng.random() < 0.1:  # an outpatient result weeks before
        p.panel(admitted - timedelta(days=rng.randint(20, 60)), rng.randint(137, 142), 4.2)

    planted: Planted | None = None
    if plants:
        planted, t, na_end = _planted(p, (i // planted_every) % 3, admitted + timedelta(hours=1))
        while t + timedelta(hours=24) < discharged:  # sodium stays where it got to
            t += timedelta(hours=24)
            p.panel(t, na_end, round(rng.uniform(3.8, 4.6), 1))
        return planted

    kind = "low" if rng.random() < 0.22 else "normal"
    first, per_day, ceiling, acquired = _sodium_path(rng, kind)
    interval = 24.0 if kind == "normal" else rng.choice([8.0, 12.0, 12.0, 24.0])
    hypokalemic = kind == "low" and rng.random() < 0.15
    if kind == "low":
        for key, share in (
            ("heart_failure", 0.2),
            ("cirrhosis", 0.08),
            ("pneumonia", 0.2),
            ("alcohol", 0.05),
        ):
            if rng.random() < share:
                p.problem(key, admitted - timedelta(days=rng.randint(1, 2000)))
        if rng.random() < 0.25:
            p.problem(
                "vomiting",
                admitted - timedelta(days=1),
                resolved=admitted + timedelta(hours=rng.randint(12, 48)),
            )
    t = admitted + timedelta(hours=1)
    value = float(139 if acquired else first)
    nadir_reached = not acquired
    first_low: datetime | None = None
    n = 0
    while t < discharged:
        if kind == "normal":
            na: float = first + rng.randint(-2, 2)
        else:
            if not nadir_reached:
                value -= per_day * interval / 24
                if value <= first:
                    value, nadir_reached = float(first), True
            else:
                value = min(float(ceiling), value + per_day * interval / 24)
            na = round(value)
        if rng.random() < 0.005:
            na = 13  # a typo for 131-139: implausible, never used
        k = round(rng.uniform(3.0, 3.4) if hypokalemic else rng.uniform(3.6, 4.8), 1)
        glucose = rng.randint(480, 650) if kind == "low" and rng.random() < 0.03 else 0.0
        p.panel(t, na, k, glucose)
        if n == 0:
            p.lab("wt", round(rng.uniform(48, 110), 1), t)
        if kind == "low" and first_low is None and na < 135 and na != 13:
            first_low = t
            _work_up(p, t, first < 125)
        n += 1
        t += timedelta(hours=interval)

    order_time = admitted + timedelta(hours=rng.uniform(2, 6))
    if kind == "normal":
        if rng.random() < 0.4:
            p.fluid("nacl09", order_time)
    elif first_low is not None:
        at = max(order_time, first_low + timedelta(hours=rng.uniform(1, 8)))
        r = rng.random()
        if r < 0.5:
            p.fluid("nacl09", at)
        elif r < 0.6:
            p.fluid("nacl045", at)
        elif r < 0.7:
            p.fluid("d5w", at)
        if first < 125 and rng.random() < 0.5:
            p.fluid("nacl3", first_low + timedelta(hours=1))
        if rng.random() < 0.05:
            p.drug(
                rng.choice(["hctz", "sertraline"]), at + timedelta(hours=3), at + timedelta(days=2)
            )
        if rng.random() < 0.03:
            p.drug("tolvaptan", at + timedelta(hours=12), at + timedelta(hours=36))
    return None


def generate(
    folder: Path | str,
    patients: int,
    *,
    days: int = 90,
    seed: int = 7,
    planted_every: int = 40,
    malformed: int = 0,
    per_file: int = 200_000,
) -> dict:
    """Write the export into ``folder`` and return what ``_planted.json`` holds."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    writer = _Writer(folder, per_file)
    planted: list[Planted] = []
    bad: list[dict[str, Any]] = []
    every = max(1, patients // malformed) if malformed else 0
    try:
        for i in range(patients):
            found = _one_patient(i, seed, days, planted_every, writer.write)
            if found:
                planted.append(found)
            if every and i % every == every - 1 and len(bad) < malformed:
                name, line = writer.write_raw(
                    "Observation", b'{"resourceType": "Observation", "id": "cut-' + str(i).encode()
                )
                bad.append({"file": name, "line": line})
    finally:
        writer.close()
    truth = {
        "hospital": "Larkspur Valley Hospital (fictional)",
        "patients": patients,
        "seed": seed,
        "from": iso(START),
        "to": iso(START + timedelta(days=days)),
        "planted_breaches": [vars(b) for b in planted],
        "malformed_lines": bad,
    }
    (folder / PLANTED_FILE).write_bytes(orjson.dumps(truth, option=orjson.OPT_INDENT_2))
    return truth


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m cds_service.rehearsal.synthetic",
        description="Write an invented Larkspur Valley Hospital Bulk Data export.",
    )
    parser.add_argument("out", metavar="OUT_DIR")
    parser.add_argument("--patients", type=int, default=1000)
    parser.add_argument("--days", type=int, default=90)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--malformed", type=int, default=0, help="malformed lines to plant")
    args = parser.parse_args(argv)
    if args.patients < 1 or args.days < 14:
        parser.error("--patients must be at least 1 and --days at least 14")
    truth = generate(
        args.out, args.patients, days=args.days, seed=args.seed, malformed=args.malformed
    )
    print(
        f"wrote {args.patients} patients to {args.out}: range {truth['from']} to {truth['to']}, "
        f"{len(truth['planted_breaches'])} planted correction-limit breaches"
    )
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
