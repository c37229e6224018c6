"""Published formulas of hyponatremia care, as plain functions of numbers.

Units follow ``clinical.context.CANONICAL_UNITS``: sodium and potassium in mmol/L, glucose and
urea nitrogen in mg/dL, osmolality in mOsm/kg, volumes in L. Each function names its source;
the numbers (divisors, factors, fractions) come from ``Thresholds`` so institutions can
override them. Nothing here rounds: callers round for display.
"""

from __future__ import annotations

from cds_service.clinical.thresholds import Thresholds


def _positive(name: str, value: float) -> None:
    if not value > 0:
        raise ValueError(f"{name} must be positive, not {value}")


def calculated_osmolality(
    sodium: float,
    glucose_mg_dl: float,
    urea_nitrogen_mg_dl: float,
    th: Thresholds,
    ethanol_mg_dl: float = 0.0,
) -> float:
    """2·Na + glucose/18 + BUN/2.8 (conventional units; Dorwart & Chalmers 1975), plus
    ethanol/4.6 when a measured ethanol is given (Nguyen 2020)."""
    return (
        2 * sodium
        + glucose_mg_dl / th.glucose_mg_dl_per_mmol_l
        + urea_osmoles(urea_nitrogen_mg_dl, th)
        + ethanol_osmoles(ethanol_mg_dl, th)
    )


def urea_osmoles(urea_nitrogen_mg_dl: float, th: Thresholds) -> float:
    """mOsm/kg that urea contributes: urea nitrogen (mg/dL) / 2.8 (Dorwart & Chalmers 1975)."""
    return urea_nitrogen_mg_dl / th.urea_nitrogen_mg_dl_per_mmol_l


def ethanol_osmoles(ethanol_mg_dl: float, th: Thresholds) -> float:
    """mOsm/kg that ethanol contributes: ethanol (mg/dL) / 4.6 (Nguyen 2020; molar mass 46)."""
    return ethanol_mg_dl / th.ethanol_mg_dl_per_mmol_l


def effective_measured_osmolality(
    measured: float,
    urea_nitrogen_mg_dl: float | None,
    ethanol_mg_dl: float | None,
    th: Thresholds,
) -> float:
    """Measured osmolality minus its ineffective part (urea, ethanol: they cross cell membranes
    and hold no water outside cells; Spasovski 2014 section 7.1). A part not measured is not
    subtracted, so the result is never below the true effective osmolality."""
    out = measured
    if urea_nitrogen_mg_dl is not None:
        out -= urea_osmoles(urea_nitrogen_mg_dl, th)
    if ethanol_mg_dl is not None:
        out -= ethanol_osmoles(ethanol_mg_dl, th)
    return out


def calculated_osmolality_si(sodium: float, glucose_mmol_l: float, urea_mmol_l: float) -> float:
    """2·Na + glucose + urea, all in mmol/L (SI form of the same formula)."""
    return 2 * sodium + glucose_mmol_l + urea_mmol_l


def effective_osmolality(sodium: float, glucose_mg_dl: float, th: Thresholds) -> float:
    """Tonicity: 2·Na + glucose/18; urea crosses cell membranes and is left out."""
    return 2 * sodium + glucose_mg_dl / th.glucose_mg_dl_per_mmol_l


def osmolal_gap(measured: float, calculated: float) -> float:
    """Measured minus calculated osmolality (mOsm/kg)."""
    return measured - calculated


def corrected_sodium(sodium: float, glucose_mg_dl: float, factor: float, th: Thresholds) -> float:
    """Sodium + factor per 100 mg/dL glucose above the reference (never below the measured)."""
    excess = max(0.0, glucose_mg_dl - th.glucose_reference)
    return sodium + factor * excess / 100.0


def corrected_sodium_katz(sodium: float, glucose_mg_dl: float, th: Thresholds) -> float:
    """Katz 1973: +1.6 mmol/L per 100 mg/dL glucose above 100."""
    return corrected_sodium(sodium, glucose_mg_dl, th.katz_factor, th)


def corrected_sodium_hillier(sodium: float, glucose_mg_dl: float, th: Thresholds) -> float:
    """Hillier 1999: +2.4 mmol/L per 100 mg/dL glucose above 100."""
    return corrected_sodium(sodium, glucose_mg_dl, th.hillier_factor, th)


def tbw_fraction(age_years: float, female: bool, th: Thresholds) -> float:
    """Fraction of body weight that is water (Adrogué & Madias 2000), adults only."""
    elderly = age_years >= th.elderly_age_years
    if female:
        return th.tbw_fraction_elderly_female if elderly else th.tbw_fraction_adult_female
    return th.tbw_fraction_elderly_male if elderly else th.tbw_fraction_adult_male


def total_body_water(weight_kg: float, fraction: float) -> float:
    """Total body water in litres: weight × fraction."""
    _positive("weight", weight_kg)
    _positive("fraction", fraction)
    return weight_kg * fraction


def delta_sodium_per_liter(
    infusate_sodium: float, infusate_potassium: float, serum_sodium: float, tbw_l: float
) -> float:
    """Adrogué–Madias: change in serum sodium after 1 L of infusate,
    ((Na + K)infusate − Na serum) / (TBW + 1)."""
    _positive("total body water", tbw_l)
    return (infusate_sodium + infusate_potassium - serum_sodium) / (tbw_l + 1.0)


def volume_to_limit(limit_rise: float, delta_per_liter: float) -> float | None:
    """Litres of infusate that raise sodium by ``limit_rise`` at ``delta_per_liter``
    (linear extrapolation of Adrogué–Madias); None when the infusate does not raise sodium."""
    if delta_per_liter <= 0:
        return None
    return limit_rise / delta_per_liter


def urine_serum_electrolyte_ratio(
    urine_sodium: float, urine_potassium: float, serum_sodium: float
) -> float:
    """(U_Na + U_K) / S_Na (Furst 2000)."""
    _positive("serum sodium", serum_sodium)
    return (urine_sodium + urine_potassium) / serum_sodium


def fluid_restriction_advice(ratio: float, th: Thresholds) -> str:
    """Furst 2000: the daily fluid allowance implied by the urine/serum electrolyte ratio."""
    if ratio > th.furst_ratio_high:
        return "restrict to < 500 mL/day; restriction alone is unlikely to raise sodium"
    if ratio >= th.furst_ratio_low:
        return "restrict to 500-700 mL/day"
    return "restrict to < 1 L/day"


def electrolyte_free_water_clearance(
    urine_volume_l: float, urine_sodium: float, urine_potassium: float, serum_sodium: float
) -> float:
    """V × (1 − (U_Na + U_K) / S_Na) in L per the urine volume's period (Rose 1986)."""
    ratio = urine_serum_electrolyte_ratio(urine_sodium, urine_potassium, serum_sodium)
    return urine_volume_l * (1.0 - ratio)


def plasma_water_percent(total_protein_g_dl: float, lipids_g_dl: float, th: Thresholds) -> float:
    """Waugh 1969: plasma water % = 99.1 − 1.03 × lipids − 0.73 × protein (g/dL)."""
    return (
        th.waugh_intercept
        - th.waugh_lipid_factor * lipids_g_dl
        - th.waugh_protein_factor * total_protein_g_dl
    )


def max_urine_volume(solute_load_mosm_per_day: float, urine_osm_mosm_kg: float) -> float:
    """Largest daily urine volume (L/day): solute load / minimal urine osmolality."""
    _positive("urine osmolality", urine_osm_mosm_kg)
    return solute_load_mosm_per_day / urine_osm_mosm_kg


def fractional_excretion(
    urine_x: float, serum_x: float, urine_creatinine: float, serum_creatinine: float
) -> float:
    """FE_x (%) = (U_x × S_cr) / (S_x × U_cr) × 100, with matching units per pair."""
    _positive("serum value", serum_x)
    _positive("urine creatinine", urine_creatinine)
    return urine_x * serum_creatinine / (serum_x * urine_creatinine) * 100.0


def egfr_ckd_epi_2021(
    creatinine_mg_dl: float, age_years: float, female: bool, th: Thresholds
) -> float:
    """CKD-EPI 2021 creatinine equation without race (Inker 2021), mL/min/1.73 m²:
    142 × min(Scr/κ, 1)^α × max(Scr/κ, 1)^−1.200 × 0.9938^age × 1.012 [female],
    κ 0.7 / 0.9 and α −0.241 / −0.302 for female / male."""
    _positive("creatinine", creatinine_mg_dl)
    _positive("age", age_years)
    kappa = th.ckd_epi_2021_kappa_female if female else th.ckd_epi_2021_kappa_male
    alpha = th.ckd_epi_2021_alpha_female if female else th.ckd_epi_2021_alpha_male
    ratio = creatinine_mg_dl / kappa
    egfr = (
        th.ckd_epi_2021_constant
        * min(ratio, 1.0) ** -alpha
        * max(ratio, 1.0) ** -th.ckd_epi_2021_upper_exponent
        * th.ckd_epi_2021_age_base**age_years
    )
    return egfr * th.ckd_epi_2021_female_factor if female else egfr
