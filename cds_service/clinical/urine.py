"""Urine findings of hypotonic hyponatremia: maximally dilute urine, low urine sodium, and the
SIADH pattern with its essential and supplemental criteria."""

from __future__ import annotations

from cds_service.clinical import formulas
from cds_service.clinical.chemistry import Chemistry
from cds_service.clinical.context import Analyte
from cds_service.clinical.findings import Finding, FindingCode, Urgency, ValueName
from cds_service.clinical.hypotonic import (
    Status,
    dilute_urine_lines,
    reset_osmostat_hint,
    siadh_essential,
    siadh_supplemental,
    volume_hint_lines,
)
from cds_service.clinical.notes import CAUTION, num, unique, value

V = ValueName


# --- Urine (hypotonic only) -----------------------------------------------------------------------


def dilute_urine_finding(c: Chemistry) -> Finding | None:
    uosm = c.val(Analyte.URINE_OSMOLALITY)
    if uosm is None or uosm >= c.th.urine_osmolality_dilute_below:
        return None
    return Finding(
        code=FindingCode.DILUTE_URINE,
        urgency=Urgency.INFO,
        summary=(
            f"Urine osmolality {num(uosm, 0)} mOsm/kg (< "
            f"{num(c.th.urine_osmolality_dilute_below, 0)}): maximally dilute urine, "
            "water intake exceeds excretion"
        ),
        details=(
            "Vasopressin is suppressed; consider primary polydipsia, low solute intake "
            "(beer, 'tea and toast') or excess hypotonic fluid.",
            *dilute_urine_lines(c.th, uosm, c.val(Analyte.URINE_VOLUME_24H)),
        ),
        values=(value(V.URINE_OSMOLALITY, uosm), value(V.SERUM_SODIUM, c.sodium.value)),
        inputs=c.inputs(Analyte.URINE_OSMOLALITY, Analyte.URINE_VOLUME_24H),
        sources=(c.th.cite("urine_osmolality_dilute_below"), c.th.cite("urine_osmolality_minimal")),
        next_steps=("Review fluid and solute intake.",),
        cautions=(CAUTION, "Correction can be rapid once intake falls: check sodium often."),
    )


def low_urine_sodium_finding(c: Chemistry) -> Finding | None:
    una = c.val(Analyte.URINE_SODIUM)
    if una is None or una > c.th.urine_sodium_low_at_most:
        return None
    return Finding(
        code=FindingCode.LOW_URINE_SODIUM,
        urgency=Urgency.INFO,
        summary=(
            f"Urine sodium {num(una, 0)} mmol/L (<= {num(c.th.urine_sodium_low_at_most, 0)})"
            " in hypotonic hyponatremia: low effective arterial blood volume"
        ),
        details=(
            "Low urine sodium suggests low effective arterial volume: true hypovolemia "
            "(extrarenal losses) or hypervolemic states (heart failure, cirrhosis, nephrotic "
            "syndrome).",
            *volume_hint_lines(c.ctx),
        ),
        values=(value(V.URINE_SODIUM, una), value(V.SERUM_SODIUM, c.sodium.value)),
        inputs=c.inputs(Analyte.URINE_SODIUM, Analyte.URINE_OSMOLALITY),
        sources=(c.th.cite("urine_sodium_low_at_most"),),
        next_steps=("Assess volume status at the bedside.",),
        cautions=(CAUTION,),
    )


def siadh_finding(c: Chemistry) -> Finding | None:
    th = c.th
    uosm, una = c.val(Analyte.URINE_OSMOLALITY), c.val(Analyte.URINE_SODIUM)
    if uosm is None or una is None:
        return None
    if uosm <= th.urine_osmolality_dilute_below or una <= th.urine_sodium_low_at_most:
        return None
    essential = siadh_essential(c.ctx, th)
    met = sum(cr.status is Status.MET for cr in essential)
    open_ = len(essential) - met
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
            f"{met} of {len(essential)} essential criteria met, {open_} open"
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
            Analyte.URIC_ACID,
            Analyte.UREA_NITROGEN,
        ),
        formulas=tuple(formulas_),
        sources=unique([*sources, th.cite("tonicity_hypotonic_below")]),
        missing=c.missing(Analyte.TSH, Analyte.CORTISOL, Analyte.URINE_POTASSIUM),
        next_steps=(
            "Settle the open criteria before calling it SIADH; look for its causes "
            "(drugs, lung or brain disease, cancer, pain, nausea).",
        ),
        cautions=(CAUTION,),
    )
