"""The one-pass max_rise against the straightforward pairwise scan it replaced.

The reference below is the former implementation, kept verbatim as the definition: for every
later result, walk back through the window and keep the largest rise (strictly later times;
ties to the earliest later result, then the latest earlier one). The sliding-window minimum
must give the same Rise: same amount, same start and same end results, with and without the
``ending_after`` cut, with repeated times and repeated values. Law (common practice for an
optimisation): a faster algorithm returns exactly what the definition returns.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime, timedelta

from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte, LabResult
from cds_service.clinical.correction import Rise, max_rise
from cds_service.clinical.episode import chronological

from .conftest import NOW, lab


def reference_max_rise(
    results: Iterable[LabResult], hours: float, ending_after: datetime | None = None
) -> Rise | None:
    ordered = chronological(results)
    window = timedelta(hours=hours)
    best: Rise | None = None
    for j, end in enumerate(ordered):
        if ending_after is not None and end.time < ending_after:
            continue
        for i in range(j - 1, -1, -1):
            start = ordered[i]
            if end.time - start.time > window:
                break
            if start.time == end.time:
                continue
            amount = end.value - start.value
            if best is None or amount > best.amount:
                best = Rise(amount, start, end)
    return best


# Few distinct times and values so equal times, equal values and window edges all occur.
_hours_ago = st.one_of(st.integers(0, 120).map(float), st.sampled_from([0.5, 23.5, 24.0, 48.0]))
_values = st.one_of(
    st.integers(105, 150).map(float), st.floats(100, 170).map(lambda v: round(v, 1))
)
series = st.lists(st.tuples(_hours_ago, _values), max_size=40)


@given(
    data=series,
    hours=st.sampled_from([24, 48, 6, 0.5]),
    cut=st.one_of(st.none(), st.integers(0, 130)),
)
def test_one_pass_equals_pairwise_reference(data: list, hours: float, cut: int | None) -> None:  # type: ignore[type-arg]
    results = [
        lab(Analyte.SODIUM, v, h, source_id=f"Observation/r{i}") for i, (h, v) in enumerate(data)
    ]
    ending_after = None if cut is None else NOW - timedelta(hours=cut)
    got = max_rise(results, hours, ending_after)
    want = reference_max_rise(results, hours, ending_after)
    assert got == want  # same amount and the same start and end results (dataclass equality)


def test_reference_cases_that_decide_ties() -> None:
    # Hand-made: two equal lows (the later is the start), an equal-time pair (never a rise),
    # and two ends with the same rise (the earlier end wins).
    results = [
        lab(Analyte.SODIUM, 118, 30, source_id="Observation/a"),
        lab(Analyte.SODIUM, 118, 20, source_id="Observation/b"),
        lab(Analyte.SODIUM, 125, 20, source_id="Observation/c"),
        lab(Analyte.SODIUM, 126, 10, source_id="Observation/d"),
        lab(Analyte.SODIUM, 126, 5, source_id="Observation/e"),
    ]
    got = max_rise(results, 24)
    assert got == reference_max_rise(results, 24)
    assert got is not None and got.amount == 8
    assert (got.start.source_id, got.end.source_id) == ("Observation/b", "Observation/d")
