"""Small builders of ClinicalContext for the clinical-core tests (invented Larkspur Valley
Hospital patients; identifiers are made up)."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import UTC, datetime, timedelta

import pytest

from cds_service.clinical.context import (
    CANONICAL_UNITS,
    Analyte,
    ClinicalContext,
    ConditionCategory,
    ConditionEntry,
    DraftFluid,
    DraftMedication,
    LabResult,
    MedicationEntry,
    PatientFacts,
    RejectedResult,
    Sex,
)
from cds_service.clinical.thresholds import Thresholds, load_thresholds

NOW = datetime(2026, 3, 14, 9, 0, tzinfo=UTC)


def lab(analyte: Analyte, value: float, hours_ago: float = 1.0, **kw: object) -> LabResult:
    return LabResult(
        analyte=analyte,
        value=value,
        time=NOW - timedelta(hours=hours_ago),
        source_id=kw.pop("source_id", f"Observation/{analyte.value}-{hours_ago:g}"),  # type: ignore[arg-type]
        raw=f"{value} {CANONICAL_UNITS[analyte]}",
        **kw,  # type: ignore[arg-type]
    )


def sodium_series(points: Iterable[tuple[float, float]]) -> tuple[LabResult, ...]:
    """(hours_ago, value) pairs -> sodium results, oldest first."""
    return tuple(sorted((lab(Analyte.SODIUM, v, h) for h, v in points), key=lambda r: r.time))


def make_ctx(
    labs: dict[Analyte, float] | None = None,
    *,
    age: float | None = 70,
    sex: Sex = Sex.FEMALE,
    weight: float | None = 60,
    series: dict[Analyte, tuple[LabResult, ...]] | None = None,
    meds: Iterable[tuple[str, str]] = (),
    conditions: Iterable[ConditionCategory] = (),
    fluids: Iterable[DraftFluid] = (),
    drafts: Iterable[DraftMedication] = (),
    rejected: Iterable[RejectedResult] = (),
) -> ClinicalContext:
    """A context whose current results are ``labs`` (drawn an hour ago); ``meds`` are
    (generic name, status) pairs of MedicationStatements."""
    current = {a: lab(a, v) for a, v in (labs or {}).items()}
    if weight is not None:
        current[Analyte.BODY_WEIGHT] = lab(Analyte.BODY_WEIGHT, weight)
    all_series: dict[Analyte, tuple[LabResult, ...]] = {a: (r,) for a, r in current.items()}
    all_series.update(series or {})
    if series and Analyte.SODIUM in series and Analyte.SODIUM not in (labs or {}):
        current[Analyte.SODIUM] = series[Analyte.SODIUM][-1]
    return ClinicalContext(
        now=NOW,
        patient=PatientFacts("Patient/lvh-0001", age, sex),
        series=all_series,
        current=current,
        rejected=tuple(rejected),
        medications=tuple(
            MedicationEntry(
                (n,), (), n.title(), s, "MedicationStatement", f"MedicationStatement/{n}"
            )
            for n, s in meds
        ),
        conditions=tuple(
            ConditionEntry(c, c.value, f"http://snomed.info/sct|{i}", f"Condition/c{i}")
            for i, c in enumerate(conditions)
        ),
        draft_fluids=tuple(fluids),
        draft_medications=tuple(drafts),
    )


@pytest.fixture
def th() -> Thresholds:
    return load_thresholds()
