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
from cds_service.clinical.hypotonic import reset_osmostat_hint, volume_hint_lines
from cds_service.clinical.notes import CAUTION, num, unique, value
from cds_service.clinical.pathway import Tonicity
from cds_service.clinical.severity import Acuity, Severity

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
    if c.sodium.direct_ise:
        lines.append(
            "Sodium measured by direct ISE on whole blood (not affected by lipids or proteins)."
        )
    if c.sodium.preliminary:
        lines.append("The sodium result is preliminary.")
    return lines


def _corrected(c: Chemistry) -> tuple[list[Value], list[str]]:
    glucose = c.val(Analyte.GLUCOSE)
    if glucose is None or glucose <= c.th.glucose_reference:
        return [], []
    na = c.sodium.value
    katz = formulas.corrected_sodium_katz(na, glucose, c.th)
    hillier = formulas.corrected_sodium_hillier(na, glucose, c.th)
    excess = (glucose - c.th.glucose_reference) / 100
    return (
        [value(V.CORRECTED_SODIUM_KATZ, katz), value(V.CORRECTED_SODIUM_HILLIER, hillier)],
        [
            f"Corrected sodium (Katz 1973) = {num(na)} + {num(c.th.katz_factor)} × "
            f"{num(excess, 2)} = {num(katz)} mmol/L",
            f"Corrected sodium (Hillier 1999) = {num(na)} + {num(c.th.hillier_factor)} × "
            f"{num(excess, 2)} = {num(hillier)} mmol/L",
        ],
    )


def _osmotic_agents(c: Chemistry) -> list[str]:
    return [
        f"{m.name} recorded ({m.source_id}): {m.drug_class.mechanism}"
        for m in active_matches(c.ctx, DrugRole.OSMOTIC_SOLUTE)
    ]


def _common_sources(c: Chemistry) -> list[str]:
    return [c.th.cite("severity_mild_lower"), c.th.cite("glucose_mg_dl_per_mmol_l")]


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
    part = _Part(
        FindingCode.HYPOTONIC,
        f"{head}, measured osmolality {num(c.measured_osmolality or 0, 0)} mOsm/kg: "
        "hypotonic hyponatremia",
        details=list(volume_hint_lines(c.ctx)),
        missing=c.missing(Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM),
        next_steps=[
            "Interpret urine osmolality, then urine sodium (2014 European guideline algorithm)."
        ],
    )
    hint = reset_osmostat_hint(c.ctx, c.th)
    if hint:
        part.details.append(hint)
    if c.call.hyperglycemia:
        part.values, part.formulas = _corrected(c)
        part.details.append("Glucose is raised but osmolality is low: hypotonic despite it.")
    return part


def _isotonic(c: Chemistry, head: str) -> _Part:
    return _Part(
        FindingCode.ISOTONIC,
        f"{head}, measured osmolality {num(c.measured_osmolality or 0, 0)} mOsm/kg: "
        "isotonic, check for pseudohyponatremia",
        details=[*_pseudo_lines(c), *_osmotic_agents(c)],
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
        summary = (
            f"Sodium {num(c.sodium.value)} mmol/L with glucose "
            f"{num(c.val(Analyte.GLUCOSE) or 0, 0)} mg/dL: corrected sodium "
            f"{values[0].value} (Katz) to {values[1].value} (Hillier) mmol/L"
        )
    else:
        summary = (
            f"{head}, measured osmolality {num(c.measured_osmolality or 0, 0)} "
            "mOsm/kg: hypertonic, look for other osmoles"
        )
    part = _Part(FindingCode.HYPERTONIC, summary, values=values, formulas=lines)
    if values:
        part.details.append(
            "Hyperglycemia draws water out of cells (translocational "
            "hyponatremia); judge sodium by the corrected values."
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


def tonicity_finding(c: Chemistry) -> Finding:
    """Exactly one of the four tonicity findings: CRITICAL when hyponatremia is profound."""
    head = f"Sodium {num(c.sodium.value)} mmol/L ({c.severity.value})"
    part = _BUILDERS[c.call.tonicity](c, head)
    cautions = [CAUTION]
    if c.severity is Severity.PROFOUND:
        cautions.append(
            "Profound hyponatremia: assess now for severe symptoms (vomiting, "
            "seizures, reduced consciousness), which call for urgent treatment."
        )
    return Finding(
        code=part.code,
        urgency=Urgency.CRITICAL if c.severity is Severity.PROFOUND else Urgency.INFO,
        summary=part.summary,
        details=(*_sodium_lines(c), *part.details),
        values=(*c.sodium_values(), *c.osmolality_values(), *part.values),
        inputs=(
            *c.inputs(Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN),
            *part.inputs,
        ),
        formulas=(*c.calculated_formula(), *part.formulas),
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


def osmolal_gap_finding(c: Chemistry) -> Finding | None:
    gap = c.osmolal_gap
    if gap is None or gap <= c.th.osmolal_gap_elevated_above:
        return None
    measured, calc = c.measured_osmolality or 0, c.calculated_osmolality or 0
    return Finding(
        code=FindingCode.OSMOLAL_GAP,
        urgency=Urgency.INFO,
        summary=(
            f"Osmolal gap {num(gap)} mOsm/kg (measured {num(measured)}, calculated "
            f"{num(calc)}): unmeasured osmoles present"
        ),
        details=(
            f"A gap above {num(c.th.osmolal_gap_elevated_above)} mOsm/kg points to "
            "unmeasured osmoles or a falsely low sodium:",
            "- mannitol, glycine or sorbitol irrigation, radiocontrast",
            "- alcohols: ethanol, methanol, ethylene glycol, isopropanol",
            "- pseudohyponatremia (very high lipids or proteins, indirect ISE)",
            *_osmotic_agents(c),
        ),
        values=(
            value(V.OSMOLAL_GAP, gap),
            *c.osmolality_values(),
            value(V.SERUM_SODIUM, c.sodium.value),
        ),
        inputs=c.inputs(Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN),
        formulas=(
            *c.calculated_formula(),
            f"Osmolal gap = {num(measured)} − {num(calc)} = {num(gap)} mOsm/kg",
        ),
        sources=(c.th.cite("osmolal_gap_elevated_above"), c.th.cite("glucose_mg_dl_per_mmol_l")),
        next_steps=("Consider toxic alcohol screening when the history fits.",),
        cautions=(CAUTION,),
    )
