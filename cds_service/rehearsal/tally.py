"""Figures of a set of patients, mergeable: a partition's tally, and the sum of all of them.

Every figure is an integer count, an integer number of seconds or minutes, or a list or
mapping sorted when merged, so the sum does not depend on how patients were split into
partitions or the order partitions finished in: an embedded run and a distributed one give
the same figures.
Patient ids stay in ``breaches`` and ``cases`` (for the explicitly requested case list);
:mod:`cds_service.rehearsal.report` never writes them into the report.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime
from typing import Any

from cds_service.rehearsal.patient import PatientOutcome

ACTIONS = ("show", "suppressed", "silent", "off")


def empty() -> dict[str, Any]:
    return {
        "patients": 0,
        "adult_patients": 0,
        "patients_without_patient_resource": 0,
        "lines_without_patient_resource": 0,
        "patient_seconds": 0,
        "calls": {},
        "cards": {},  # "code|indicator" -> {action: n}
        "patients_shown": {},  # "code|indicator" -> patients with one shown at least
        "shown_days": {},  # "code|indicator" -> {day: shown}
        "episodes": {},  # severity -> n
        "osmolality_minutes": [],
        "urine_minutes": [],
        "osmolality_never": 0,
        "urine_never": 0,
        "breaches": [],
        "cases": [],
    }


def _iso(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def add_patient(tally: dict[str, Any], out: PatientOutcome) -> None:
    tally["patients"] += 1
    tally["adult_patients"] += int(out.adult)
    tally["patient_seconds"] += out.patient_seconds
    for hook, n in out.calls.items():
        tally["calls"][hook] = tally["calls"].get(hook, 0) + n
    shown_keys: set[str] = set()
    for day, code, indicator, action in out.decisions:
        key = f"{code}|{indicator}"
        counts = tally["cards"].setdefault(key, {})
        counts[action] = counts.get(action, 0) + 1
        if action == "show":
            shown_keys.add(key)
            days = tally["shown_days"].setdefault(key, {})
            days[str(day)] = days.get(str(day), 0) + 1
    for key in shown_keys:
        tally["patients_shown"][key] = tally["patients_shown"].get(key, 0) + 1
    for ep in out.episodes:
        tally["episodes"][ep["severity"]] = tally["episodes"].get(ep["severity"], 0) + 1
        for what in ("osmolality", "urine"):
            minutes = ep[f"{what}_minutes"]
            if minutes is None:
                tally[f"{what}_never"] += 1
            else:
                tally[f"{what}_minutes"].append(minutes)
        if ep["severity"] == "profound":
            tally["cases"].append(
                {
                    "patient": out.patient_id,
                    "why": "profound hyponatremia",
                    "at": _iso(ep["first_low"]),
                    "detail": f"nadir {ep['nadir']:g} mmol/L",
                }
            )
    for b in out.breaches:
        row = {k: _iso(v) if isinstance(v, datetime) else v for k, v in b.items()}
        tally["breaches"].append({"patient": out.patient_id, **row})
        tally["cases"].append(
            {
                "patient": out.patient_id,
                "why": "correction-limit breach",
                "at": row["rise_end"],
                "detail": (
                    f"rise {b['rise']:g} mmol/L within {b['window_hours']} h above "
                    f"{b['limit']:g} ({b['limit_set']} limits); "
                    + ("warned before" if b["warned_before"] else "no warning card before")
                ),
            }
        )


def merge(tallies: Iterable[dict[str, Any]]) -> dict[str, Any]:
    total = empty()
    for t in tallies:
        for key in (
            "patients",
            "adult_patients",
            "patients_without_patient_resource",
            "lines_without_patient_resource",
            "patient_seconds",
            "osmolality_never",
            "urine_never",
        ):
            total[key] += t[key]
        for key in ("calls", "patients_shown", "episodes"):
            for k, n in t[key].items():
                total[key][k] = total[key].get(k, 0) + n
        for key in ("cards", "shown_days"):
            for k, inner in t[key].items():
                into = total[key].setdefault(k, {})
                for k2, n in inner.items():
                    into[k2] = into.get(k2, 0) + n
        for key in ("osmolality_minutes", "urine_minutes", "breaches", "cases"):
            total[key].extend(t[key])
    for key in ("calls", "patients_shown", "episodes"):
        total[key] = dict(sorted(total[key].items()))
    for key in ("cards", "shown_days"):
        total[key] = {k: dict(sorted(v.items())) for k, v in sorted(total[key].items())}
    total["osmolality_minutes"].sort()
    total["urine_minutes"].sort()
    total["breaches"].sort(key=lambda b: (b["rise_end"], b["patient"]))
    total["cases"].sort(key=lambda c: (c["at"], c["patient"], c["why"]))
    return total
