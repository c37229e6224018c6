"""The tonicity finding (exactly one of unknown / hypotonic / isotonic / hypertonic) and the
osmolal-gap finding of the patient-view work-up."""

from __future__ import annotations

from dataclasses import dataclass, field

from cds_service.clinical import formulas
from cds_service.clinical.chemistry import Chemistry
from cds_service.clinical.context import Analyte
from cds_service.clinical.drugs import DrugRole, active_matches
from cds_service.clinical.findings import (
    Finding,
    FindingCode,
    InputUsed,
    Urgency,
    Value,
    ValueName,
)
from cds_service.clinical.hypotonic import (
    random_cortisol_line,
    reset_osmostat_hint,
    volume_hint_lines,
)
from cds_service.clinical.notes import CAUTION, num, qty, shorten, unique, value
from cds_service.clinical.pathway import Tonicity
from cds_service.clinical.severity import Acuity

V = ValueName


# --- Tonicity card ----------------------------------------------------------------------------

_ACUITY_TEXT = {
    Acuity.ACUTE: "acute (normal sodium documented within 48 h)",
    Acuity.CHRONIC: "chronic (low sodium documented for more than 48 h)",
    Acuity.UNKNOWN: "onset not documented: treat as chronic (2014 European guideline)",
}


def _sodium_lines(c: Chemistry) -> list[str]:
    th = c.th
    lines = [
        f"Severity: **{c.severity.value}** (mild {num(th.severity_mild_lower)}-"
        f"{num(th.sodium_lower_normal - 1)}, moderate {num(th.severity_moderate_lower)}-"
        f"{num(th.severity_mild_lower - 1)}, profound < {num(th.severity_moderate_lower)} "
        "mmol/L).",
        f"Acuity: {_ACUITY_TEXT[c.acuity]}.",
    ]
    if c.translocational and c.corrected_hillier is not None:
        corrected = c.corrected_severity
        lines[0] = (
            f"Severity: the measured sodium is {c.severity.value}, but glucose draws water out "
            f"of cells: the glucose-corrected sodium {num(c.corrected_hillier)} mmol/L (Hillier "
            "1999) is "
            + (f"**{corrected.value}**" if corrected else "**not low**")
            + "; severity and urgency follow the corrected value."
        )
    if c.sodium.direct_ise:
        lines.append(
            "Sodium measured by direct ISE on whole blood (not affected by lipids or proteins)."
        )
    if c.sodium.preliminary:
        lines.append("The sodium result is preliminary.")
    return lines


def _corrected(c: Chemistry) -> tuple[list[Value], list[str]]:
    values = c.corrected_values()
    glucose = c.val(Analyte.GLUCOSE)
    if not values or glucose is None:
        return [], []
    na = c.sodium.value
    excess = (glucose - c.th.glucose_reference) / 100
    return (
        values,
        [
            f"Corrected sodium (Katz 1973) = {num(na)} + {num(c.th.katz_factor)} × "
            f"{num(excess, 2)} = {num(c.corrected_katz or 0)} mmol/L",
            f"Corrected sodium (Hillier 1999) = {num(na)} + {num(c.th.hillier_factor)} × "
            f"{num(excess, 2)} = {num(c.corrected_hillier or 0)} mmol/L",
        ],
    )


def _set_aside_lines(c: Chemistry) -> list[str]:
    """Which osmoles were set aside from the measured osmolality, and why."""
    measured, effective = c.measured_osmolality, c.call.effective_osmolality
    if measured is None or effective is None:
        return []
    parts = c.set_aside()
    lines = []
    if parts:
        lines.append(
            f"Effective osmolality {num(effective)} mOsm/kg = measured {num(measured)} minus "
            f"{' and '.join(parts)}. "
            + (
                "Urea and ethanol are ineffective osmoles: they cross"
                if len(parts) > 1
                else f"{parts[0].split(' ')[0].capitalize()} is an ineffective osmole: it crosses"
            )
            + " cell membranes, holds no water outside cells and does not protect cells from "
            "swelling, so tonicity is judged without it (2014 European guideline, section 7.1)."
        )
    if c.val(Analyte.UREA_NITROGEN) is None:
        lines.append(
            "Urea nitrogen not measured: urea could not be set aside, so the effective "
            "osmolality may be lower than the measured value."
        )
    return lines


def _osmotic_agents(c: Chemistry) -> list[str]:
    return [
        f"{m.name} recorded ({m.source_id}): {m.drug_class.mechanism}"
        for m in active_matches(c.ctx, DrugRole.OSMOTIC_SOLUTE)
    ]


def _common_sources(c: Chemistry) -> list[str]:
    out = [
        c.th.cite("severity_mild_lower"),
        c.th.cite("tonicity_hypotonic_below"),
        c.th.cite("glucose_mg_dl_per_mmol_l"),
    ]
    if c.val(Analyte.ETHANOL) is not None:
        out.append(c.th.cite("ethanol_mg_dl_per_mmol_l"))
    return out


@dataclass
class _Part:
    """What one tonicity class adds to the shared sodium and osmolality lines."""

    code: FindingCode
    summary: str
    details: list[str] = field(default_factory=list)
    values: list[Value] = field(default_factory=list)
    formulas: list[str] = field(default_factory=list)
    sources: list[str] = field(default_factory=list)
    missing: tuple[str, ...] = ()
    next_steps: list[str] = field(default_factory=list)
    inputs: tuple[InputUsed, ...] = ()


def _unknown(c: Chemistry, head: str) -> _Part:
    calc = c.calculated_osmolality
    provisional = f"; calculated {num(calc)} mOsm/kg is provisional" if calc else ""
    return _Part(
        FindingCode.TONICITY_UNKNOWN,
        f"{head}, no measured osmolality{provisional}",
        details=[
            "No measured serum osmolality in the window: tonicity cannot be classified."
            + (
                " The calculated value misses unmeasured osmoles and pseudohyponatremia."
                if calc
                else ""
            )
        ],
        missing=c.missing(
            Analyte.OSMOLALITY, Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM, Analyte.GLUCOSE
        ),
        next_steps=[
            "Measure serum osmolality, with urine osmolality and urine sodium from the "
            "same time, before treatment where possible."
        ],
    )


def _hypotonic(c: Chemistry, head: str) -> _Part:
    measured, effective = c.measured_osmolality, c.call.effective_osmolality
    if c.call.residual:
        summary = f"{head}: still low once glucose is corrected, hypotonic hyponatremia remains"
    elif (
        measured is not None and effective is not None and measured >= c.th.tonicity_hypotonic_below
    ):
        summary = (
            f"{head}, osmolality {num(measured, 0)} measured, {num(effective, 0)} effective "
            "(ineffective osmoles set aside): hypotonic"
        )
    else:
        summary = (
            f"{head}, measured osmolality {num(measured or 0, 0)} mOsm/kg: hypotonic hyponatremia"
        )
    part = _Part(
        FindingCode.HYPOTONIC,
        summary,
        details=[*_set_aside_lines(c), *volume_hint_lines(c.ctx)],
        missing=c.missing(Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM),
        next_steps=[
            "Interpret urine osmolality first, then urine sodium only if urine osmolality is "
            f"above {num(c.th.urine_osmolality_dilute_at_most)} mOsm/kg (2014 European "
            "guideline algorithm, section 7.2)."
        ],
    )
    for line in (reset_osmostat_hint(c.ctx, c.th), random_cortisol_line(c)):
        if line:
            part.details.append(line)
    if c.call.hyperglycemia:
        part.values, part.formulas = _corrected(c)
        part.sources += [c.th.cite("hillier_factor"), c.th.cite("katz_factor")]
        if c.call.residual:
            part.details.append(
                "Glucose first, then what remains: the glucose explains only part of the low "
                "sodium. The hypotonic hyponatremia that remains after correction is worked up "
                "as such (urine studies, SIADH criteria, endocrine screen)."
            )
            if c.call.provisional:
                part.details.append(
                    "No measured osmolality: this rests on the corrected sodium and is provisional."
                )
                part.missing = c.missing(
                    Analyte.OSMOLALITY, Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM
                )
        else:
            part.details.append("Glucose is raised but osmolality is low: hypotonic despite it.")
    return part


def _isotonic(c: Chemistry, head: str) -> _Part:
    return _Part(
        FindingCode.ISOTONIC,
        f"{head}, measured osmolality {num(c.measured_osmolality or 0, 0)} mOsm/kg: "
        "isotonic, check for pseudohyponatremia",
        details=[*_set_aside_lines(c), *_pseudo_lines(c), *_osmotic_agents(c)],
        sources=[c.th.cite("waugh_intercept")],
        missing=c.missing(Analyte.TRIGLYCERIDES, Analyte.TOTAL_PROTEIN),
        next_steps=[
            "Re-measure sodium by direct ISE (blood-gas analyser); it is not affected "
            "by lipids or proteins."
        ],
        inputs=c.inputs(Analyte.TRIGLYCERIDES, Analyte.TOTAL_PROTEIN)[1:],
    )


def _hypertonic(c: Chemistry, head: str) -> _Part:
    values, lines = _corrected(c) if c.call.hyperglycemia else ([], [])
    if values:
        glucose = qty(c.val(Analyte.GLUCOSE) or 0, Analyte.GLUCOSE, c.ctx.display_units)
        summary = (
            f"Sodium {num(c.sodium.value)} mmol/L with glucose {glucose}: corrected sodium "
            f"{values[0].value} (Katz) to {values[1].value} (Hillier) mmol/L, not low"
        )
    else:
        summary = (
            f"{head}, measured osmolality {num(c.measured_osmolality or 0, 0)} "
            "mOsm/kg: hypertonic, look for other osmoles"
        )
    part = _Part(FindingCode.HYPERTONIC, summary, values=values, formulas=lines)
    part.details += _set_aside_lines(c)
    if values:
        part.details.append(
            "Hyperglycemia draws water out of cells (translocational hyponatremia): the "
            "corrected sodium is in the normal range, so no hypotonic hyponatremia remains "
            "once glucose is accounted for; judge sodium by the corrected values."
        )
        part.sources += [c.th.cite("katz_factor"), c.th.cite("hillier_factor")]
    part.details.append(
        "Other osmoles to consider where recorded: mannitol, sorbitol, glycine "
        "irrigation, radiocontrast."
    )
    part.details += _osmotic_agents(c)
    if c.call.provisional:
        part.details.append(
            "No measured osmolality: the class rests on the glucose value and is provisional."
        )
        part.missing = c.missing(Analyte.OSMOLALITY)
    return part


_BUILDERS = {
    Tonicity.UNKNOWN: _unknown,
    Tonicity.HYPOTONIC: _hypotonic,
    Tonicity.ISOTONIC: _isotonic,
    Tonicity.HYPERTONIC: _hypertonic,
}


def _head(c: Chemistry) -> str:
    if not c.translocational:
        return f"Sodium {num(c.sodium.value)} mmol/L ({c.severity.value})"
    corrected = c.corrected_severity
    return (
        f"Sodium {num(c.sodium.value)} mmol/L (corrected "
        f"{num(c.corrected_hillier or 0)}: {corrected.value if corrected else 'not low'})"
    )


def tonicity_finding(c: Chemistry) -> Finding:
    """Exactly one of the four tonicity findings: CRITICAL when hyponatremia is profound (by
    the glucose-corrected sodium when the low sodium is translocational)."""
    part = _BUILDERS[c.call.tonicity](c, _head(c))
    cautions = [CAUTION]
    if c.profound:
        cautions.append(
            "Profound hyponatremia: assess now for severe symptoms (vomiting, "
            "seizures, reduced consciousness), which call for urgent treatment."
        )
    return Finding(
        code=part.code,
        urgency=Urgency.CRITICAL if c.profound else Urgency.INFO,
        summary=shorten(part.summary, 139),
        details=(*_sodium_lines(c), *part.details),
        values=(*c.sodium_values(), *c.osmolality_values(), *part.values),
        inputs=(
            *c.inputs(Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN, Analyte.ETHANOL),
            *part.inputs,
        ),
        formulas=(*c.calculated_formula(), *c.effective_formula(), *part.formulas),
        sources=unique([*_common_sources(c), *part.sources]),
        missing=part.missing,
        next_steps=tuple(part.next_steps),
        cautions=tuple(cautions),
    )


def _pseudo_lines(c: Chemistry) -> list[str]:
    th = c.th
    tg, tp = c.val(Analyte.TRIGLYCERIDES), c.val(Analyte.TOTAL_PROTEIN)
    lines = ["Pseudohyponatremia clues (indirect ISE reads low when plasma water is low):"]
    if tg is None and tp is None:
        lines.append("- triglycerides and total protein not measured")
    if tg is not None:
        high = tg > th.triglycerides_clue_above
        lines.append(
            f"- triglycerides {num(tg, 0)} mg/dL"
            + (f" (above {num(th.triglycerides_clue_above, 0)}: a clue)" if high else "")
        )
    if tp is not None:
        high = tp > th.total_protein_clue_above
        lines.append(
            f"- total protein {num(tp)} g/dL"
            + (f" (above {num(th.total_protein_clue_above)}: paraprotein clue)" if high else "")
        )
        water = formulas.plasma_water_percent(tp, (tg or 0) / 1000, th)
        lines.append(
            f"- plasma water (Waugh 1969) ≈ {num(water)} % (normal about 93 %; "
            "triglycerides stand in for total lipids)"
        )
    lines.append(
        "Isotonic solutes (mannitol, glycine or sorbitol irrigation) also give this "
        "picture where recorded."
    )
    return lines


# --- Osmolal gap --------------------------------------------------------------------------------


def _pseudo_suspected(c: Chemistry) -> bool:
    tg, tp = c.val(Analyte.TRIGLYCERIDES), c.val(Analyte.TOTAL_PROTEIN)
    return (
        c.call.tonicity is Tonicity.ISOTONIC
        or (tg is not None and tg > c.th.triglycerides_clue_above)
        or (tp is not None and tp > c.th.total_protein_clue_above)
    )


def osmolal_gap_finding(c: Chemistry) -> Finding | None:
    gap = c.osmolal_gap
    if gap is None or gap <= c.th.osmolal_gap_elevated_above:
        return None
    measured, calc = c.measured_osmolality or 0, c.calculated_osmolality or 0
    pseudo = _pseudo_suspected(c)
    lipids = "- pseudohyponatremia (very high lipids or proteins, indirect ISE)"
    others = [
        "- mannitol, glycine or sorbitol irrigation, radiocontrast",
        "- alcohols: methanol, ethylene glycol, isopropanol"
        + ("" if c.val(Analyte.ETHANOL) is not None else ", ethanol"),
    ]
    causes = [lipids, *others] if pseudo else [*others, lipids]
    details = [
        f"A gap above {num(c.th.osmolal_gap_elevated_above)} mOsm/kg points to unmeasured "
        "osmoles or a falsely low sodium"
        + (", most likely here lipids or protein:" if pseudo else ":"),
        *causes,
    ]
    if c.val(Analyte.ETHANOL) is not None:
        details.append(
            "The measured ethanol is part of the calculated osmolality: the gap is what it "
            "leaves unexplained."
        )
    next_steps = (
        (
            "Check triglycerides and total protein and re-measure sodium by direct ISE first; "
            "consider toxic alcohols if these do not explain the gap.",
        )
        if pseudo
        else ("Consider toxic alcohol screening when the history fits.",)
    )
    return Finding(
        code=FindingCode.OSMOLAL_GAP,
        urgency=Urgency.INFO,
        summary=(
            f"Osmolal gap {num(gap)} mOsm/kg (measured {num(measured)}, calculated "
            f"{num(calc)}): "
            + ("lipids or protein likely (pseudohyponatremia)" if pseudo else "unmeasured osmoles")
        ),
        details=(*details, *_osmotic_agents(c)),
        values=(
            value(V.OSMOLAL_GAP, gap),
            *c.osmolality_values(),
            value(V.SERUM_SODIUM, c.sodium.value),
        ),
        inputs=c.inputs(
            Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN, Analyte.ETHANOL
        ),
        formulas=(
            *c.calculated_formula(),
            f"Osmolal gap = {num(measured)} − {num(calc)} = {num(gap)} mOsm/kg",
        ),
        sources=(c.th.cite("osmolal_gap_elevated_above"), c.th.cite("glucose_mg_dl_per_mmol_l")),
        next_steps=next_steps,
        cautions=(CAUTION,),
    )
