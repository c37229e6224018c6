"""Severity bands, acuity and the tonicity pathway."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.pathway import Tonicity, classify
from cds_service.clinical.severity import SEVERITY_RANK, Acuity, Severity, acuity, severity
from cds_service.clinical.thresholds import Thresholds, load_thresholds

from .conftest import NOW, sodium_series

TH = load_thresholds()


def test_guideline_bands(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): mild 130-134, moderate 125-129, profound < 125 mmol/L.
    assert severity(135, th) is None
    assert severity(134.9, th) is Severity.MILD
    assert severity(130, th) is Severity.MILD
    assert severity(129.9, th) is Severity.MODERATE
    assert severity(125, th) is Severity.MODERATE
    assert severity(124.9, th) is Severity.PROFOUND


@given(a=st.floats(90, 160), b=st.floats(90, 160))
def test_severity_is_monotone(a: float, b: float) -> None:
    # Law: a lower sodium is never judged less severe.
    lo, hi = sorted((a, b))
    rank = lambda s: 0 if s is None else SEVERITY_RANK[s]  # noqa: E731
    assert rank(severity(lo, TH)) >= rank(severity(hi, TH))


def test_acute_when_normal_sodium_within_48h(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): hyponatremia documented to exist < 48 h is acute.
    series = sodium_series([(30, 139), (6, 124)])
    assert acuity(series, NOW, th) is Acuity.ACUTE


def test_chronic_when_low_for_more_than_48h(th: Thresholds) -> None:
    series = sodium_series([(200, 139), (72, 128), (2, 126)])
    assert acuity(series, NOW, th) is Acuity.CHRONIC


def test_unknown_without_a_prior_normal(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): when onset is unknown, treat as chronic; we say "unknown".
    assert acuity(sodium_series([(10, 126), (2, 125)]), NOW, th) is Acuity.UNKNOWN
    # normal 60 h ago, low 10 h ago: onset somewhere in between, cannot tell.
    assert acuity(sodium_series([(60, 138), (10, 126)]), NOW, th) is Acuity.UNKNOWN


@pytest.mark.parametrize(
    ("osm", "glucose", "expected", "provisional"),
    [
        (262, 95, Tonicity.HYPOTONIC, False),  # Spasovski 2014: < 275 hypotonic
        (274.9, None, Tonicity.HYPOTONIC, False),
        (275, 95, Tonicity.ISOTONIC, False),  # 275-295 isotonic
        (295, None, Tonicity.ISOTONIC, False),
        (295.1, 95, Tonicity.HYPERTONIC, False),  # > 295 hypertonic
        (288, 650, Tonicity.HYPERTONIC, False),  # hyperglycemia: translocational
        (262, 650, Tonicity.HYPOTONIC, False),  # measured hypotonic wins over glucose
        (None, 95, Tonicity.UNKNOWN, True),
        (None, None, Tonicity.UNKNOWN, True),
        (None, 650, Tonicity.HYPERTONIC, True),
    ],
)
def test_pathway_table(
    th: Thresholds,
    osm: float | None,
    glucose: float | None,
    expected: Tonicity,
    provisional: bool,
) -> None:
    call = classify(osm, glucose, th)
    assert call.tonicity is expected
    assert call.provisional is provisional


@given(
    osm=st.one_of(st.none(), st.floats(200, 400)),
    glucose=st.one_of(st.none(), st.floats(20, 2000)),
)
def test_pathway_never_returns_two_classes(osm: float | None, glucose: float | None) -> None:
    # Law: exactly one of the four predicates holds for any input.
    t = classify(osm, glucose, TH).tonicity
    predicates = {
        Tonicity.HYPOTONIC: osm is not None and osm < 275,
        Tonicity.HYPERTONIC: (osm is not None and osm > 295)
        or (glucose is not None and glucose > 200 and (osm is None or osm >= 275)),
        Tonicity.UNKNOWN: osm is None and (glucose is None or glucose <= 200),
    }
    predicates[Tonicity.ISOTONIC] = not any(predicates.values())
    assert [k for k, v in predicates.items() if v] == [t]
