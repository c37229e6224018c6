"""Urine findings of hypotonic hyponatremia in the order of the 2014 European algorithm
(Spasovski 2014, section 7.2): urine osmolality first (at most 100 mOsm/kg: relative excess
water intake), urine sodium only when urine osmolality is above 100 (at most 30 mmol/L: low
effective arterial volume likely; above 30: the SIADH pattern with its criteria)."""

from __future__ import annotations

from cds_service.clinical import formulas
from cds_service.clinical.chemistry import Chemistry
from cds_service.clinical.context import Analyte
from cds_service.clinical.findings import Finding, FindingCode, Urgency, ValueName
from cds_service.clinical.hypotonic import (
    Status,
    dilute_urine_lines,
    fractional_excretions,
    recent_diuretics,
    reset_osmostat_hint,
    siadh_essential,
    siadh_supplemental,
    siadh_triggers,
    volume_hint_lines,
)
from cds_service.clinical.notes import CAUTION, num, unique, value

V = ValueName


# --- Urine (hypotonic only) -----------------------------------------------------------------------


def _urine_concentrated(c: Chemistry) -> float | None:
    """Urine osmolality when it is above the dilute boundary (urine sodium may be read)."""
    uosm = c.val(Analyte.URINE_OSMOLALITY)
    return uosm if uosm is not None and uosm > c.th.urine_osmolality_dilute_at_most else None


def dilute_urine_finding(c: Chemistry) -> Finding | None:
    th = c.th
    uosm = c.val(Analyte.URINE_OSMOLALITY)
    if uosm is None or uosm > th.urine_osmolality_dilute_at_most:
        return None
    maximal = uosm <= th.urine_osmolality_minimal
    word = "maximally dilute urine" if maximal else "dilute urine"
    return Finding(
        code=FindingCode.DILUTE_URINE,
        urgency=Urgency.INFO,
        summary=(
            f"Urine osmolality {num(uosm, 0)} mOsm/kg (≤ "
            f"{num(th.urine_osmolality_dilute_at_most, 0)}): {word}, suggests relative excess "
            "water intake"
        ),
        details=(
            "Vasopressin appears suppressed: the 2014 European guideline accepts relative "
            "excess water intake as the likely cause (primary polydipsia, low solute intake such "
            "as beer or 'tea and toast', or excess hypotonic fluid).",
            (
                f"At or below {num(th.urine_osmolality_minimal)} mOsm/kg the urine is as dilute "
                "as a healthy kidney makes it."
                if maximal
                else f"Urine is dilute but not maximally so (a healthy kidney reaches about "
                f"{num(th.urine_osmolality_minimal)} mOsm/kg)."
            ),
            "Urine sodium is not interpreted at this urine osmolality (2014 European algorithm).",
            *dilute_urine_lines(th, uosm, c.val(Analyte.URINE_VOLUME_24H)),
        ),
        values=(value(V.URINE_OSMOLALITY, uosm), value(V.SERUM_SODIUM, c.sodium.value)),
        inputs=c.inputs(Analyte.URINE_OSMOLALITY, Analyte.URINE_VOLUME_24H),
        sources=(
            th.cite("urine_osmolality_dilute_at_most"),
            th.cite("urine_osmolality_minimal"),
        ),
        next_steps=("Review fluid and solute intake.",),
        cautions=(CAUTION, "Correction can be rapid once intake falls: check sodium often."),
    )


def low_urine_sodium_finding(c: Chemistry) -> Finding | None:
    una = c.val(Analyte.URINE_SODIUM)
    uosm = _urine_concentrated(c)
    if una is None or uosm is None or una > c.th.urine_sodium_low_at_most:
        return None
    return Finding(
        code=FindingCode.LOW_URINE_SODIUM,
        urgency=Urgency.INFO,
        summary=(
            f"Urine sodium {num(una, 0)} mmol/L (≤ {num(c.th.urine_sodium_low_at_most, 0)}) "
            f"with urine osmolality {num(uosm, 0)}: suggests low effective arterial volume"
        ),
        details=(
            "Low urine sodium with a urine osmolality above "
            f"{num(c.th.urine_osmolality_dilute_at_most)} mOsm/kg suggests low effective "
            "arterial volume (2014 European algorithm): true hypovolemia (extrarenal losses) or "
            "hypervolemic states (heart failure, cirrhosis, nephrotic syndrome).",
            *volume_hint_lines(c.ctx),
        ),
        values=(
            value(V.URINE_SODIUM, una),
            value(V.URINE_OSMOLALITY, uosm),
            value(V.SERUM_SODIUM, c.sodium.value),
        ),
        inputs=c.inputs(Analyte.URINE_SODIUM, Analyte.URINE_OSMOLALITY),
        sources=(c.th.cite("urine_sodium_low_at_most"),),
        next_steps=("Assess volume status at the bedside.",),
        cautions=(CAUTION,),
    )


def siadh_finding(c: Chemistry) -> Finding | None:
    th = c.th
    uosm, una = _urine_concentrated(c), c.val(Analyte.URINE_SODIUM)
    if uosm is None or una is None or una <= th.urine_sodium_low_at_most:
        return None
    essential = siadh_essential(c)
    met = sum(cr.status is Status.MET for cr in essential)
    not_met = sum(cr.status is Status.NOT_MET for cr in essential)
    open_ = len(essential) - met - not_met
    details = [
        "Essential criteria (Schwartz & Bartter 1957, as restated in 2014):",
        *(cr.line() for cr in essential),
    ]
    supplemental = siadh_supplemental(c.ctx, th)
    if supplemental:
        details += ["Supplemental criteria with data:", *(cr.line() for cr in supplemental)]
    values = [
        value(V.URINE_OSMOLALITY, uosm),
        value(V.URINE_SODIUM, una),
        value(V.SERUM_SODIUM, c.sodium.value),
    ]
    formulas_: list[str] = []
    sources = [th.cite("urine_sodium_low_at_most"), th.cite("siadh_fe_urate_above")]
    missing = list(c.missing(Analyte.TSH, Analyte.CORTISOL, Analyte.URINE_POTASSIUM))
    fe = fractional_excretions(c.ctx)
    for key, name in (("uric acid", V.FE_URATE), ("sodium", V.FE_SODIUM)):
        if key in fe:
            values.append(value(name, fe[key], 2))
    if c.egfr is not None:
        values.append(value(V.EGFR, c.egfr, 0))
    diuretics = recent_diuretics(c.ctx)
    if diuretics:
        names = ", ".join(m.name for m in diuretics)
        if "uric acid" in fe:
            verdict = (
                "supports SIADH"
                if fe["uric acid"] > th.siadh_fe_urate_above
                else ("does not support SIADH")
            )
            details.append(
                f"{names} active: urine sodium is raised by the diuretic. Fractional excretion "
                f"of urate {num(fe['uric acid'])} % {verdict} (cut-off "
                f"{num(th.siadh_fe_urate_above)} %, Fenske 2008, valid on diuretics)."
            )
        else:
            details.append(
                f"{names} active: urine sodium is raised by the diuretic. Measure the "
                "fractional excretion of urate (serum and urine uric acid and creatinine): above "
                f"{num(th.siadh_fe_urate_above)} % supports SIADH even on diuretics (Fenske 2008)."
            )
            missing += c.missing(
                Analyte.URIC_ACID,
                Analyte.URINE_URIC_ACID,
                Analyte.CREATININE,
                Analyte.URINE_CREATININE,
            )
    triggers = siadh_triggers(c.ctx)
    if triggers:
        details.append("Recorded conditions that can cause SIADH: " + "; ".join(triggers) + ".")
    uk = c.val(Analyte.URINE_POTASSIUM)
    if uk is not None and c.sodium.value > 0:
        ratio = formulas.urine_serum_electrolyte_ratio(una, uk, c.sodium.value)
        values.append(value(V.URINE_SERUM_ELECTROLYTE_RATIO, ratio, 2))
        formulas_.append(
            f"(UNa + UK) / SNa = ({num(una)} + {num(uk)}) / {num(c.sodium.value)} = {num(ratio, 2)}"
        )
        advice = formulas.fluid_restriction_advice(ratio, th)
        details.append(f"Fluid restriction (Furst 2000): {advice}.")
        sources.append(th.cite("furst_ratio_high"))
        volume = c.val(Analyte.URINE_VOLUME_24H)
        if volume is not None:
            efwc = formulas.electrolyte_free_water_clearance(volume, una, uk, c.sodium.value)
            formulas_.append(
                f"Electrolyte-free water clearance = {num(volume, 2)} × (1 − "
                f"{num(ratio, 2)}) = {num(efwc, 2)} L/day"
            )
    hint = reset_osmostat_hint(c.ctx, th)
    if hint:
        details.append(hint)
    return Finding(
        code=FindingCode.SIADH_PATTERN,
        urgency=Urgency.INFO,
        summary=(
            f"Urine osmolality {num(uosm, 0)} and urine sodium {num(una, 0)}: SIADH pattern; "
            f"{met} of {len(essential)} essential criteria met, "
            + (f"{not_met} not met, " if not_met else "")
            + f"{open_} open"
        ),
        details=tuple(details),
        values=tuple(values),
        inputs=c.inputs(
            Analyte.OSMOLALITY,
            Analyte.URINE_OSMOLALITY,
            Analyte.URINE_SODIUM,
            Analyte.URINE_POTASSIUM,
            Analyte.TSH,
            Analyte.CORTISOL,
            Analyte.FREE_T4,
            Analyte.CREATININE,
            Analyte.EGFR,
            Analyte.URIC_ACID,
            Analyte.UREA_NITROGEN,
        ),
        formulas=tuple(formulas_),
        sources=unique([*sources, th.cite("tonicity_hypotonic_below"), *_criteria_sources(c)]),
        missing=tuple(dict.fromkeys(missing)),
        next_steps=(
            "Settle the open criteria before calling it SIADH; look for its causes "
            "(drugs, lung or brain disease, cancer, pain, nausea, recent surgery).",
        ),
        cautions=(CAUTION,),
    )


def _criteria_sources(c: Chemistry) -> list[str]:
    out = [c.th.cite("free_t4_lower_normal"), c.th.cite("cortisol_morning_from_hour")]
    if c.egfr is not None and Analyte.EGFR not in c.ctx.current:
        out.append(c.th.cite("ckd_epi_2021_constant"))
    out.append(c.th.cite("renal_insufficiency_egfr_below"))
    return out
