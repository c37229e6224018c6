"""Formulas against published worked examples and reference values (source beside each)."""

from __future__ import annotations

import math

import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical import formulas as f
from cds_service.clinical.infusates import infusates, sodium_from_percent
from cds_service.clinical.thresholds import Thresholds

ureg = pint.UnitRegistry()
GLUCOSE_G_PER_MOL = 180.16  # C6H12O6
UREA_NITROGEN_G_PER_MOL = 28.014  # two nitrogen atoms per urea molecule


def mg_dl_to_mmol_l(mg_dl: float, g_per_mol: float) -> float:
    q = (mg_dl * ureg("mg/dL")) / (g_per_mol * ureg("g/mol"))
    return q.to("mmol/L").magnitude


# --- Unit conversions, cross-checked with pint -------------------------------------------


def test_glucose_divisor_matches_molar_mass(th: Thresholds) -> None:
    # Dorwart & Chalmers 1975 divide glucose (mg/dL) by 18: pint with 180.16 g/mol gives 18.016.
    per_mmol = 1 / mg_dl_to_mmol_l(1, GLUCOSE_G_PER_MOL)
    assert per_mmol == pytest.approx(18.016, abs=1e-3)
    assert th.glucose_mg_dl_per_mmol_l == pytest.approx(per_mmol, rel=2e-3)


def test_urea_nitrogen_divisor_matches_molar_mass(th: Thresholds) -> None:
    # Dorwart & Chalmers 1975 divide urea nitrogen (mg/dL) by 2.8: 28.014 g N per mol urea.
    per_mmol = 1 / mg_dl_to_mmol_l(1, UREA_NITROGEN_G_PER_MOL)
    assert th.urea_nitrogen_mg_dl_per_mmol_l == pytest.approx(per_mmol, rel=1e-3)


def test_saline_sodium_from_percent_matches_pint() -> None:
    # 0.9 % = 9 g/L NaCl; NaCl 58.44 g/mol (pint) -> 154 mmol/L, as labelled (common practice).
    for percent, labelled in ((0.9, "nacl_0_9"), (3.0, "nacl_3"), (0.45, "nacl_0_45")):
        q = (percent * 10 * ureg("g/L")) / (58.44 * ureg("g/mol"))
        assert sodium_from_percent(percent) == pytest.approx(q.to("mmol/L").magnitude)
        assert sodium_from_percent(percent) == pytest.approx(infusates()[labelled].sodium, abs=0.5)


# --- Serum osmolality ---------------------------------------------------------------------


def test_calculated_osmolality_normal_adult(th: Thresholds) -> None:
    # Dorwart & Chalmers 1975, Clin Chem 21:190, Abstract: glucose/18 and BUN/2.8 (mg/dL) as
    # read there (their best fit is 1.86 Na + 9; the 2 Na form is common practice): Na 140,
    # glucose 90, BUN 14
    # -> 280 + 5 + 5 = 290 mOsm/kg, inside the 275-295 reference range (Spasovski 2014).
    osm = f.calculated_osmolality(140, 90, 14, th)
    assert osm == pytest.approx(290.0)
    assert th.tonicity_hypotonic_below <= osm <= th.tonicity_hypertonic_above


@given(
    na=st.floats(100, 170),
    glucose=st.floats(40, 1500),
    bun=st.floats(2, 200),
)
def test_si_and_conventional_osmolality_agree(na: float, glucose: float, bun: float) -> None:
    # The SI form (2 Na + glucose + urea, mmol/L) and the conventional form must agree once the
    # units are converted by pint (molar masses 180.16 and 28.014 g/mol); the rounded divisors
    # 18 and 2.8 cost at most ~0.3 % of the glucose and urea terms.
    from cds_service.clinical.thresholds import load_thresholds

    th = load_thresholds()
    si = f.calculated_osmolality_si(
        na,
        mg_dl_to_mmol_l(glucose, GLUCOSE_G_PER_MOL),
        mg_dl_to_mmol_l(bun, UREA_NITROGEN_G_PER_MOL),
    )
    conventional = f.calculated_osmolality(na, glucose, bun, th)
    assert conventional == pytest.approx(si, abs=0.01 * (glucose / 18 + bun / 2.8) + 1e-9)


def test_effective_osmolality_leaves_out_urea(th: Thresholds) -> None:
    # Tonicity excludes urea (Spasovski 2014: urea is an ineffective osmole, from memory).
    assert f.effective_osmolality(120, 180, th) == pytest.approx(250.0)
    assert f.calculated_osmolality(120, 180, 28, th) - f.effective_osmolality(120, 180, th) == (
        pytest.approx(10.0)
    )


def test_osmolal_gap(th: Thresholds) -> None:
    # A gap above 10 mOsm/kg is elevated (common practice): 300 measured vs 282 calculated.
    gap = f.osmolal_gap(300, f.calculated_osmolality(135, 108, 14, th))
    assert gap == pytest.approx(300 - (270 + 6 + 5))
    assert gap > th.osmolal_gap_elevated_above


# --- Glucose-corrected sodium -------------------------------------------------------------


def test_katz_factor(th: Thresholds) -> None:
    # Katz 1973 (from memory): sodium falls 1.6 mmol/L per 100 mg/dL glucose above 100:
    # glucose 600 with sodium 120 -> corrected 128.
    assert f.corrected_sodium_katz(120, 600, th) == pytest.approx(128.0)


def test_hillier_factor(th: Thresholds) -> None:
    # Hillier, Abbott & Barrett 1999, Am J Med 106:399, Abstract (Results, Conclusion): sodium
    # falls 2.4 meq/L per 100 mg/dL glucose: glucose 600, sodium 120 -> 132.
    assert f.corrected_sodium_hillier(120, 600, th) == pytest.approx(132.0)


def test_no_correction_at_or_below_reference(th: Thresholds) -> None:
    # Katz 1973: the correction applies to glucose above 100 mg/dL only (from memory).
    assert f.corrected_sodium_katz(128, 90, th) == 128
    assert f.corrected_sodium_hillier(128, 100, th) == 128


@given(na=st.floats(100, 150), g1=st.floats(0, 2000), g2=st.floats(0, 2000))
def test_corrected_sodium_rises_with_glucose(na: float, g1: float, g2: float) -> None:
    # Law of both corrections: more glucose never gives a lower corrected sodium, and Hillier's
    # larger factor never gives less than Katz's.
    from cds_service.clinical.thresholds import load_thresholds

    th = load_thresholds()
    lo, hi = sorted((g1, g2))
    assert f.corrected_sodium_katz(na, lo, th) <= f.corrected_sodium_katz(na, hi, th)
    assert f.corrected_sodium_hillier(na, lo, th) <= f.corrected_sodium_hillier(na, hi, th)
    assert f.corrected_sodium_katz(na, hi, th) <= f.corrected_sodium_hillier(na, hi, th)


# --- Body water and the Adrogué–Madias formula ---------------------------------------------


@pytest.mark.parametrize(
    ("age", "female", "fraction"),
    [(40, False, 0.6), (40, True, 0.5), (78, False, 0.5), (78, True, 0.45)],
)
def test_tbw_fractions(th: Thresholds, age: float, female: bool, fraction: float) -> None:
    # Adrogué & Madias 2000, NEJM (from memory): 0.6 men, 0.5 women, 0.5 elderly men,
    # 0.45 elderly women.
    assert f.tbw_fraction(age, female, th) == fraction


def test_adrogue_madias_hypertonic_saline_example(th: Thresholds) -> None:
    # Adrogué & Madias 2000 NEJM worked example (from memory): elderly woman, 50 kg, sodium
    # 108 mmol/L; TBW 0.45 x 50 = 22.5 L; 1 L of 3 % saline (513 mmol/L) raises sodium by
    # (513 - 108) / (22.5 + 1) = 17.2 mmol/L.
    tbw = f.total_body_water(50, f.tbw_fraction(78, True, th))
    assert tbw == pytest.approx(22.5)
    nacl3 = infusates()["nacl_3"]
    delta = f.delta_sodium_per_liter(nacl3.sodium, nacl3.potassium, 108, tbw)
    assert round(delta, 1) == 17.2
    # Same paper (from memory): a rise of 8 mmol/L needs 8 / 17.2 = 0.465 L over 24 h.
    assert f.volume_to_limit(8, delta) == pytest.approx(0.465, abs=0.002)


def test_adrogue_madias_isotonic_saline_example(th: Thresholds) -> None:
    # Adrogué & Madias 2000 (from memory): the formula counts Na + K of the infusate; 1 L of
    # 0.9 % saline in a 60-kg young man with sodium 112 raises sodium by (154-112)/(36+1) = 1.1.
    tbw = f.total_body_water(60, f.tbw_fraction(30, False, th))
    delta = f.delta_sodium_per_liter(154, 0, 112, tbw)
    assert round(delta, 1) == 1.1


def test_infusate_with_less_sodium_than_serum_lowers_sodium(th: Thresholds) -> None:
    # Adrogué & Madias 2000: the sign of (Na+K)infusate - Na serum gives the direction.
    d5w = infusates()["d5w"]
    delta = f.delta_sodium_per_liter(d5w.sodium, d5w.potassium, 125, 30)
    assert delta == pytest.approx(-125 / 31)
    assert f.volume_to_limit(8, delta) is None


def test_body_water_needs_positive_weight() -> None:
    with pytest.raises(ValueError, match="weight"):
        f.total_body_water(0, 0.5)


# --- Urine ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("una", "uk", "sna", "advice"),
    [
        (110, 40, 125, "< 500 mL/day"),  # ratio 1.2
        (60, 30, 125, "500-700 mL/day"),  # ratio 0.72
        (30, 20, 125, "< 1 L/day"),  # ratio 0.4
    ],
)
def test_furst_ratio(th: Thresholds, una: float, uk: float, sna: float, advice: str) -> None:
    # Furst 2000 (from memory): (UNa + UK)/SNa > 1 -> < 500 mL/day; 0.5-1 -> 500-700 mL/day;
    # < 0.5 -> < 1 L/day.
    ratio = f.urine_serum_electrolyte_ratio(una, uk, sna)
    assert ratio == pytest.approx((una + uk) / sna)
    assert advice in f.fluid_restriction_advice(ratio, th)


def test_electrolyte_free_water_clearance() -> None:
    # Rose 1986 (from memory): V x (1 - (UNa + UK)/SNa); 2 L urine with UNa 60, UK 30 at
    # SNa 120 clears 0.5 L of electrolyte-free water; ratio > 1 gives a negative clearance.
    assert f.electrolyte_free_water_clearance(2.0, 60, 30, 120) == pytest.approx(0.5)
    assert f.electrolyte_free_water_clearance(1.0, 120, 60, 120) < 0


def test_max_urine_volume(th: Thresholds) -> None:
    # Berl 2008 (from memory): urine volume is capped by solute excretion / minimal urine
    # osmolality: 250 mOsm/day ('tea and toast') at 50 mOsm/kg -> 5 L/day.
    assert f.max_urine_volume(th.solute_load_low, th.urine_osmolality_minimal) == 5.0
    assert f.max_urine_volume(900, 50) == 18.0


def test_plasma_water_waugh(th: Thresholds) -> None:
    # Waugh 1969 (from memory): normal protein 7 g/dL and lipids 0.6 g/dL leave ~93 %
    # water; paraprotein (total protein 12 g/dL) lowers it to ~89.6 %.
    assert f.plasma_water_percent(7, 0.6, th) == pytest.approx(93.4, abs=0.05)
    assert f.plasma_water_percent(12, 0.6, th) == pytest.approx(89.7, abs=0.1)


def test_fractional_excretion() -> None:
    # Fractional excretion of sodium (common practice textbook example): UNa 40, SNa 140,
    # UCr 100 mg/dL, SCr 1 mg/dL -> 0.29 %.
    assert f.fractional_excretion(40, 140, 100, 1.0) == pytest.approx(0.2857, abs=1e-4)
    # Fenske et al. 2008, J Clin Endocrinol Metab 93:2991, Abstract (Results): an FE urate
    # cut-off of 12 % (PPV 100 % on diuretics) supports SIADH; urate 40/3.0 with creatinine
    # 60/0.8 -> 17.8 %.
    fe_urate = f.fractional_excretion(40, 3.0, 60, 0.8)
    assert math.isclose(fe_urate, 17.78, abs_tol=0.01)
