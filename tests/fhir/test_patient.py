"""Patient -> age at evaluation time and administrative gender."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from cds_service.clinical.context import Analyte, Sex
from tests.fhir.factory import ingest, patient


@pytest.mark.parametrize(
    ("birth", "age"),
    [
        ("1951-03-14", 75.71),  # 30 Nov 2026: 75 full years and 261/365 of the next
        ("2008-11-30", 18.0),  # 18th birthday on the evaluation date
        ("2008-12-01", 17.997),  # one day short of 18
    ],
)
def test_age_at_evaluation_time(birth: str, age: float) -> None:
    facts = ingest(patient(birth)).context.patient
    assert facts.age_years == pytest.approx(age, abs=0.01)


def test_partial_birth_date_reads_as_youngest_possible_age() -> None:
    # born some time in 2008: on 30 Nov 2026 the patient may still be 17, so not yet adult
    assert ingest(patient("2008")).context.patient.age_years < 18
    assert ingest(patient("2008-11")).context.patient.age_years == pytest.approx(18.0, abs=0.01)


@pytest.mark.parametrize(
    ("gender", "sex"),
    [
        ("female", Sex.FEMALE),
        ("male", Sex.MALE),
        ("other", Sex.UNKNOWN),
        ("unknown", Sex.UNKNOWN),
        (None, Sex.UNKNOWN),
    ],
)
def test_gender(gender: str | None, sex: Sex) -> None:
    assert ingest(patient(gender=gender)).context.patient.sex is sex


def test_no_patient_resource_gives_unknown_facts() -> None:
    facts = ingest().context.patient
    assert facts.age_years is None and facts.sex is Sex.UNKNOWN and facts.patient_id == "lvh-4471"


def test_birth_after_now_gives_no_age() -> None:
    now = datetime(2026, 1, 1, tzinfo=UTC)
    assert ingest(patient("2027-01-01"), now=now).context.patient.age_years is None


def test_one_day_before_the_18th_birthday_is_under_18() -> None:
    assert ingest(patient("2008-12-01")).context.patient.age_years < 18


def test_bundle_without_patient_id_takes_its_patient_and_drops_others() -> None:
    from cds_service.config import IngestSettings
    from cds_service.fhir import build_context
    from tests.fhir.factory import NOW, observation

    mine = observation("na", "2951-2", 127)
    theirs = observation("na2", "2951-2", 141)
    theirs["subject"] = {"reference": "Patient/lvh-9999"}
    out = build_context([patient(), mine, theirs], now=NOW, settings=IngestSettings())
    assert out.context.patient.patient_id == "lvh-4471"
    assert [r.value for r in out.context.series[Analyte.SODIUM]] == [127]
    (line,) = [x for x in out.report.lines if x.resource == "Patient/lvh-4471"]
    assert line.understood_as == "patient: female, born 1951-03-14"
