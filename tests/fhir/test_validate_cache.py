"""The process-wide cache of validation answers: same answer as a fresh check, bounded."""

from __future__ import annotations

from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.fhir import validate
from tests.fhir.factory import observation

_JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=8),
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner, max_size=3)
    ),
    max_leaves=8,
)


@settings(max_examples=150, deadline=None)
@given(status=_JSON, unit=_JSON, gender=_JSON)
def test_cached_answers_equal_fresh_checks(status: Any, unit: Any, gender: Any) -> None:
    # Law: validation is a pure function of the JSON, so an answer given from the cache (the
    # second call) is the one the R4B model gives now (fhir.resources R4B, HL7 FHIR R4B).
    obs = observation("c1", "2951-2", 130)
    obs.update(status=status, valueQuantity={"value": 130, "unit": unit})
    patient = {"resourceType": "Patient", "id": "p1", "gender": gender}
    for resource, fields in ((obs, validate._READ["Observation"]), (patient, None)):
        data = resource if fields is None else {k: resource[k] for k in fields if k in resource}
        fresh = validate._check(resource["resourceType"], data)
        assert validate.problem(resource) == fresh
        assert validate.problem(resource) == fresh  # now from the cache


def test_the_cache_is_bounded_and_keeps_the_newest() -> None:
    answers = validate._Answers(2)
    for gender in ("male", "female", "other"):
        assert answers.check("Patient", {"resourceType": "Patient", "gender": gender}) is None
    assert len(answers._answers) == 2
    bad = answers.check("Patient", {"resourceType": "Patient", "gender": 5})
    assert bad is not None and "Patient" in bad
    assert answers.check("Patient", {"resourceType": "Patient", "gender": 5}) == bad
    with pytest.raises(ValueError):
        validate._Answers(0)
