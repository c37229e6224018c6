"""The volume that reaches the 24-h limit counts the rise already made in those 24 h.

The limits of Verbalis 2013 (US expert panel) and Spasovski 2014 (European guideline) bound
the total change of serum sodium within any 24 h, whatever raised it (from memory), so an
order may spend only what is left of the limit.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte, DraftFluid, Sex
from cds_service.clinical.correction import risen_last_24h
from cds_service.clinical.engine import evaluate_orders
from cds_service.clinical.findings import FindingCode, ValueName
from cds_service.clinical.thresholds import Thresholds
from tests.clinical.conftest import make_ctx, sodium_series

HTS = DraftFluid("MedicationRequest/hts", "3% NaCl", named_solution="nacl_3")


def _hts_card(ctx, th):
    found = {f.code: f for f in evaluate_orders(ctx, th)}
    return found[FindingCode.HYPERTONIC_SALINE_ORDER]


def test_rise_so_far_is_current_minus_lowest_of_the_last_24h() -> None:
    series = sodium_series([(30, 104), (20, 108), (10, 111), (1, 113)])
    ctx = make_ctx(series={Analyte.SODIUM: series})
    # 104 lies outside the 24 h before the 113 drawn an hour ago; the lowest inside is 108.
    assert risen_last_24h(ctx) == 5


def test_falling_or_single_sodium_has_risen_nothing() -> None:
    assert risen_last_24h(make_ctx({Analyte.SODIUM: 120})) == 0
    falling = make_ctx(series={Analyte.SODIUM: sodium_series([(12, 124), (1, 120)])})
    assert risen_last_24h(falling) == 0


def test_hypertonic_saline_volume_spends_only_what_is_left(th: Thresholds) -> None:
    # Adrogué & Madias 2000 worked example (from memory): 50 kg elderly woman at sodium 108,
    # 1 L of 3 % saline raises sodium 17.2 mmol/L. Here sodium already rose from 104 to 108 in
    # the last 10 h; 104 <= 105 makes the 8 mmol/L high-risk limit apply (Verbalis 2013), and
    # 8 - 4 = 4 mmol/L is left: 4 / 17.2 = 0.23 L instead of 0.47 L.
    ctx = make_ctx(
        age=78,
        sex=Sex.FEMALE,
        weight=50,
        fluids=[HTS],
        series={Analyte.SODIUM: sodium_series([(11, 104), (1, 108)])},
    )
    f = _hts_card(ctx, th)
    v = {x.name: x.value for x in f.values}
    assert v[ValueName.DELTA_SODIUM_PER_LITER] == 17.2
    assert v[ValueName.CORRECTION_LIMIT_24H] == 8
    assert v[ValueName.MAX_VOLUME_24H] == pytest.approx(0.23, abs=0.01)
    assert any("8 − 4 already risen = 4" in line for line in f.formulas)


def test_a_used_up_limit_says_so_and_offers_no_volume(th: Thresholds) -> None:
    ctx = make_ctx(
        age=60,
        sex=Sex.MALE,
        weight=70,
        fluids=[HTS],
        series={Analyte.SODIUM: sodium_series([(20, 112), (1, 122)])},
    )
    f = _hts_card(ctx, th)  # exactly the 10 mmol/L limit used: not above it, nothing left
    assert "already used" in f.summary
    assert {x.name: x.value for x in f.values}[ValueName.MAX_VOLUME_24H] == 0
    assert any("24-h limit already used" in line for line in f.formulas)


@given(
    start=st.floats(min_value=100, max_value=134),
    rise=st.floats(min_value=0, max_value=20),
)
def test_volume_never_grows_as_more_of_the_limit_is_used(start: float, rise: float) -> None:
    """Law: the more sodium has already risen, the less infusate reaches the limit."""
    from cds_service.clinical.thresholds import load_thresholds

    th = load_thresholds()

    def volume(already: float) -> float:
        series = sodium_series([(12, start), (1, start + already)])
        ctx = make_ctx(
            age=50, sex=Sex.MALE, weight=70, fluids=[HTS], series={Analyte.SODIUM: series}
        )
        v = {x.name: x.value for x in _hts_card(ctx, th).values}
        return float(v.get(ValueName.MAX_VOLUME_24H, 0.0))  # above the limit: none offered

    assert volume(rise) <= volume(0) + 1e-9


def test_above_the_limit_hypertonic_saline_is_against_the_plan(th: Thresholds) -> None:
    # Spasovski 2014 section 8.5: above the limit, stop the active treatment and re-lower.
    ctx = make_ctx(
        age=60,
        sex=Sex.MALE,
        weight=70,
        fluids=[HTS],
        series={Analyte.SODIUM: sodium_series([(20, 112), (1, 123)])},
    )
    f = _hts_card(ctx, th)
    assert "against re-lowering" in f.summary and f.remove_draft == HTS.resource_id
    assert ValueName.MAX_VOLUME_24H not in {x.name for x in f.values}
