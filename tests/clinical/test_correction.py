"""Correction-rate surveillance: window maxima, limits, high-risk reasons."""

from __future__ import annotations

from datetime import timedelta

from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte, ConditionCategory
from cds_service.clinical.correction import (
    applicable_limits,
    correction_finding,
    episode_start,
    max_rise,
    surveil,
)
from cds_service.clinical.findings import FindingCode, Urgency, ValueName
from cds_service.clinical.thresholds import Thresholds, load_thresholds

from .conftest import NOW, lab, make_ctx, sodium_series

TH = load_thresholds()


def test_rise_above_10_in_24h_is_flagged(th: Thresholds) -> None:
    # Verbalis 2013 / Spasovski 2014 (from memory): no more than 10 mmol/L in any 24 h.
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(26, 118), (20, 121), (0.5, 129)])})
    status = surveil(ctx, th)
    assert status is not None and status.rise_24h is not None
    assert status.rise_24h.amount == 8  # 121 -> 129 within 19.5 h; 118 is 25.5 h before 129
    assert not status.exceeded
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(23, 118), (0.5, 129)])})
    finding = correction_finding(ctx, th)
    assert finding is not None and finding.code is FindingCode.CORRECTION_RATE
    assert finding.urgency is Urgency.CRITICAL
    values = {v.name: v.value for v in finding.values}
    assert values[ValueName.SODIUM_CHANGE_24H] == 11
    assert values[ValueName.CORRECTION_LIMIT_24H] == 10


def test_exactly_at_the_limit_is_not_flagged(th: Thresholds) -> None:
    # Verbalis 2013: the limit is "<= 10", so a rise of exactly 10 is allowed.
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(23, 118), (0.5, 128)])})
    assert correction_finding(ctx, th) is None


def test_48h_limit(th: Thresholds) -> None:
    # Verbalis 2013 (from memory): no more than 18 mmol/L in any 48 h; 9 + 10 = 19 over 46 h
    # stays within each 24-h limit but exceeds 18 in 48 h.
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(46, 110), (22, 119), (0, 129)])})
    status = surveil(ctx, th)
    assert status is not None and not status.exceeded_24h and status.exceeded_48h
    finding = correction_finding(ctx, th)
    assert finding is not None and any("within 48 h" in d for d in finding.details)
    us = correction_finding(ctx, load_thresholds({"correction_guideline": "us"}))
    assert us is not None and "within 48 h" in us.summary and "18 mmol/L limit" in us.summary


def test_high_risk_sodium_lowers_the_limit(th: Thresholds) -> None:
    # Verbalis 2013 (from memory): sodium <= 105 mmol/L -> at most 8 mmol/L in 24 h.
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(22, 104), (1, 113)])})
    limits = applicable_limits(ctx, th)
    assert limits.limit_24h == 8
    assert any("105" in r for r in limits.high_risk_reasons)
    finding = correction_finding(ctx, th)
    assert finding is not None and "8 mmol/L limit" in finding.summary


def test_other_high_risk_reasons(th: Thresholds) -> None:
    # Verbalis 2013 (from memory): hypokalemia, alcohol use disorder, malnutrition and advanced
    # liver disease put the patient at risk of osmotic demyelination.
    base = sodium_series([(22, 118), (1, 124)])
    plain = make_ctx(series={Analyte.SODIUM: base})
    assert applicable_limits(plain, th).high_risk_reasons == ()
    low_k = make_ctx({Analyte.POTASSIUM: 3.1}, series={Analyte.SODIUM: base})
    assert "hypokalemia" in applicable_limits(low_k, th).high_risk_reasons[0]
    for cat in (
        ConditionCategory.ALCOHOL_USE_DISORDER,
        ConditionCategory.MALNUTRITION,
        ConditionCategory.CIRRHOSIS,
    ):
        ctx = make_ctx(series={Analyte.SODIUM: base}, conditions=[cat])
        assert applicable_limits(ctx, th).limit_24h == 8


def test_override_changes_the_limit() -> None:
    strict = load_thresholds({"correction_limit_24h": 6, "correction_limit_24h_high_risk": 6})
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(20, 118), (1, 125)])})
    assert correction_finding(ctx, load_thresholds()) is None
    assert correction_finding(ctx, strict) is not None


def test_overcorrection_into_the_normal_range_is_still_seen(th: Thresholds) -> None:
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(20, 122), (1, 136)])})
    finding = correction_finding(ctx, th)
    assert finding is not None and "14" in finding.summary


def test_episode_start_is_the_nadir(th: Thresholds) -> None:
    ctx = make_ctx(
        series={
            Analyte.SODIUM: sodium_series([(300, 126), (290, 140), (40, 124), (30, 119), (5, 127)])
        }
    )
    assert episode_start(ctx) == NOW - timedelta(hours=30)
    assert episode_start(make_ctx({Analyte.SODIUM: 140})) is None


def test_no_episode_without_low_sodium(th: Thresholds) -> None:
    ctx = make_ctx(series={Analyte.SODIUM: sodium_series([(30, 136), (1, 141)])})
    assert surveil(ctx, th) is None
    assert applicable_limits(ctx, th).limit_24h == 10


points = st.lists(st.tuples(st.floats(0, 200), st.integers(100, 145)), min_size=1, max_size=12)


@given(data=points, seed=st.randoms())
def test_window_maxima_do_not_depend_on_input_order(data: list, seed) -> None:  # type: ignore[no-untyped-def]
    # Law: the largest rise is a property of the set of results, not of their order.
    results = [
        lab(Analyte.SODIUM, v, h, source_id=f"Observation/n{i}") for i, (h, v) in enumerate(data)
    ]
    shuffled = list(results)
    seed.shuffle(shuffled)
    for hours in (24, 48):
        a, b = max_rise(results, hours), max_rise(shuffled, hours)
        assert (a is None) == (b is None)
        if a is not None and b is not None:
            assert a.amount == b.amount


@given(data=points)
def test_48h_maximum_is_at_least_the_24h_maximum(data: list) -> None:  # type: ignore[type-arg]
    results = [lab(Analyte.SODIUM, v, h) for h, v in data]
    r24, r48 = max_rise(results, 24), max_rise(results, 48)
    if r24 is not None:
        assert r48 is not None and r48.amount >= r24.amount
        assert timedelta(0) < r24.end.time - r24.start.time <= timedelta(hours=24)


def test_old_overcorrection_is_history(th: Thresholds) -> None:
    # Verbalis 2013 (from memory): demyelination shows 2-6 days after a rapid rise; a rise that
    # ended more than 7 days ago (common practice look-back) no longer raises a card.
    old = sodium_series([(24 * 9, 118), (24 * 8.5, 131), (24 * 3, 137), (2, 138)])
    assert correction_finding(make_ctx(series={Analyte.SODIUM: old}), th) is None
    recent = sodium_series([(24 * 6, 118), (24 * 5.5, 131), (2, 138)])
    assert correction_finding(make_ctx(series={Analyte.SODIUM: recent}), th) is not None
