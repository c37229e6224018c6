"""Patient-view work-up: tonicity, osmolal gap, urine, SIADH, drugs and endocrine screen.

Each function returns at most one Finding; :func:`workup_findings` assembles them for a
patient whose current sodium is low. Rules follow the table of finding codes in DESIGN.md.
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical import formulas
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult
from cds_service.clinical.drugs import DrugRole, active_matches
from cds_service.clinical.findings import Finding, FindingCode, InputUsed, Urgency, Value, ValueName
from cds_service.clinical.hypotonic import (
    Status,
    dilute_urine_lines,
    reset_osmostat_hint,
    siadh_essential,
    siadh_supplemental,
    volume_hint_lines,
)
from cds_service.clinical.notes import CAUTION, num, shorten, unique, used, value
from cds_service.clinical.pathway import Tonicity, TonicityCall, classify
from cds_service.clinical.severity import Acuity, Severity, acuity, severity
from cds_service.clinical.thresholds import Thresholds

V = ValueName


@dataclass(frozen=True, slots=True)
class Chemistry:
    """The current chemistry of a hyponatremic patient, computed once per evaluation."""

    sodium: LabResult
    severity: Severity
    acuity: Acuity
    call: TonicityCall
    calculated_osmolality: float | None
    ctx: ClinicalContext
    th: Thresholds

    def lab(self, analyte: Analyte) -> LabResult | None:
        return self.ctx.current.get(analyte)

    def val(self, analyte: Analyte) -> float | None:
        result = self.ctx.current.get(analyte)
        return None if result is None else result.value

    @property
    def measured_osmolality(self) -> float | None:
        return self.val(Analyte.OSMOLALITY)

    @property
    def osmolal_gap(self) -> float | None:
        m, c = self.measured_osmolality, self.calculated_osmolality
        return None if m is None or c is None else formulas.osmolal_gap(m, c)

    def inputs(self, *analytes: Analyte) -> tuple[InputUsed, ...]:
        labs = [self.sodium, *(self.lab(a) for a in analytes)]
        return tuple(used(r) for r in labs if r is not None)

    def missing(self, *analytes: Analyte) -> tuple[str, ...]:
        return tuple(a.value for a in analytes if a not in self.ctx.current)

    def sodium_values(self) -> list[Value]:
        return [value(V.SERUM_SODIUM, self.sodium.value), Value(V.SEVERITY, self.severity.value)]

    def osmolality_values(self) -> list[Value]:
        out = []
        if self.measured_osmolality is not None:
            out.append(value(V.MEASURED_OSMOLALITY, self.measured_osmolality))
        if self.calculated_osmolality is not None:
            out.append(value(V.CALCULATED_OSMOLALITY, self.calculated_osmolality))
        return out

    def calculated_formula(self) -> tuple[str, ...]:
        glucose, bun = self.val(Analyte.GLUCOSE), self.val(Analyte.UREA_NITROGEN)
        if self.calculated_osmolality is None or glucose is None or bun is None:
            return ()
        return (
            f"Calculated osmolality = 2 × {num(self.sodium.value)} + {num(glucose)}/"
            f"{num(self.th.glucose_mg_dl_per_mmol_l)} + {num(bun)}/"
            f"{num(self.th.urea_nitrogen_mg_dl_per_mmol_l)} = "
            f"{num(self.calculated_osmolality)} mOsm/kg",
        )


def chemistry(ctx: ClinicalContext, th: Thresholds) -> Chemistry | None:
    """The chemistry of a hyponatremic patient; None when sodium is missing or not low."""
    sodium = ctx.current.get(Analyte.SODIUM)
    if sodium is None:
        return None
    sev = severity(sodium.value, th)
    if sev is None:
        return None
    glucose = ctx.current.get(Analyte.GLUCOSE)
    bun = ctx.current.get(Analyte.UREA_NITROGEN)
    osm = ctx.current.get(Analyte.OSMOLALITY)
    calculated = (
        None
        if glucose is None or bun is None
        else formulas.calculated_osmolality(sodium.value, glucose.value, bun.value, th)
    )
    return Chemistry(
        sodium=sodium,
        severity=sev,
        acuity=acuity(ctx.series.get(Analyte.SODIUM, (sodium,)), ctx.now, th),
        call=classify(None if osm is None else osm.value,
                      None if glucose is None else glucose.value, th),
        calculated_osmolality=calculated,
        ctx=ctx,
        th=th,
    )


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
        lines.append("Sodium measured by direct ISE on whole blood (not affected by lipids or "
                     "proteins).")
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


def tonicity_finding(c: Chemistry) -> Finding:
    """Exactly one of the four tonicity findings."""
    th = c.th
    na, sev = num(c.sodium.value), c.severity.value
    urgency = Urgency.CRITICAL if c.severity is Severity.PROFOUND else Urgency.INFO
    details = _sodium_lines(c)
    cautions = [CAUTION]
    if c.severity is Severity.PROFOUND:
        cautions.append("Profound hyponatremia: assess now for severe symptoms (vomiting, "
                        "seizures, reduced consciousness), which call for urgent treatment.")
    formulas_ = list(c.calculated_formula())
    values = c.sodium_values() + c.osmolality_values()
    sources = _common_sources(c)
    missing: tuple[str, ...] = ()
    next_steps: list[str] = []
    measured = c.measured_osmolality
    tonicity = c.call.tonicity
    inputs = c.inputs(Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN)

    if tonicity is Tonicity.UNKNOWN:
        code = FindingCode.TONICITY_UNKNOWN
        calc = c.calculated_osmolality
        summary = f"Sodium {na} mmol/L ({sev}), no measured osmolality" + (
            f"; calculated {num(calc, 0)} mOsm/kg is provisional" if calc is not None else ""
        )
        details.append("No measured serum osmolality in the window: tonicity cannot be "
                       "classified. The calculated value is provisional; it misses "
                       "unmeasured osmoles and pseudohyponatremia.")
        missing = c.missing(Analyte.OSMOLALITY, Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM,
                            Analyte.GLUCOSE)
        next_steps.append("Measure serum osmolality, with urine osmolality and urine sodium "
                          "from the same time, before treatment where possible.")
    elif tonicity is Tonicity.HYPOTONIC:
        code = FindingCode.HYPOTONIC
        summary = (f"Sodium {na} mmol/L ({sev}), measured osmolality {num(measured or 0, 0)} "
                   "mOsm/kg: hypotonic hyponatremia")
        details.extend(volume_hint_lines(c.ctx))
        hint = reset_osmostat_hint(c.ctx, th)
        if hint:
            details.append(hint)
        values_k, lines_k = _corrected(c)
        if values_k:
            details.append("Glucose is raised but osmolality is low: hypotonic despite glucose.")
            values += values_k
            formulas_ += lines_k
        missing = c.missing(Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM)
        next_steps.append("Interpret urine osmolality, then urine sodium (2014 European "
                          "guideline algorithm).")
    elif tonicity is Tonicity.ISOTONIC:
        code = FindingCode.ISOTONIC
        summary = (f"Sodium {na} mmol/L ({sev}), measured osmolality {num(measured or 0, 0)} "
                   "mOsm/kg: isotonic, check for pseudohyponatremia")
        details.extend(_pseudo_lines(c))
        details.extend(_osmotic_agents(c))
        sources.append(th.cite("waugh_intercept"))
        missing = c.missing(Analyte.TRIGLYCERIDES, Analyte.TOTAL_PROTEIN)
        next_steps.append("Re-measure sodium by direct ISE (blood-gas analyser); it is not "
                          "affected by lipids or proteins.")
        inputs += c.inputs(Analyte.TRIGLYCERIDES, Analyte.TOTAL_PROTEIN)[1:]
    else:
        code = FindingCode.HYPERTONIC
        values_k, lines_k = _corrected(c)
        values += values_k
        formulas_ += lines_k
        if values_k:
            katz, hillier = values_k[0].value, values_k[1].value
            summary = (f"Sodium {na} mmol/L with glucose {num(c.val(Analyte.GLUCOSE) or 0, 0)} "
                       f"mg/dL: corrected sodium {katz} (Katz) to {hillier} (Hillier) mmol/L")
            details.append("Hyperglycemia draws water out of cells (translocational "
                           "hyponatremia); judge sodium by the corrected values.")
            sources += [th.cite("katz_factor"), th.cite("hillier_factor")]
        else:
            summary = (f"Sodium {na} mmol/L ({sev}), measured osmolality "
                       f"{num(measured or 0, 0)} mOsm/kg: hypertonic, look for other osmoles")
        details.append("Other osmoles to consider where recorded: mannitol, sorbitol, glycine "
                       "irrigation, radiocontrast.")
        details.extend(_osmotic_agents(c))
        if c.call.provisional:
            details.append("No measured osmolality: the class rests on the glucose value and "
                           "is provisional.")
            missing = c.missing(Analyte.OSMOLALITY)
    return Finding(
        code=code, urgency=urgency, summary=summary, details=tuple(details),
        values=tuple(values), inputs=inputs, formulas=tuple(formulas_),
        sources=unique(sources), missing=missing, next_steps=tuple(next_steps),
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
        lines.append(f"- triglycerides {num(tg, 0)} mg/dL" + (
            f" (above {num(th.triglycerides_clue_above, 0)}: a clue)" if high else ""))
    if tp is not None:
        high = tp > th.total_protein_clue_above
        lines.append(f"- total protein {num(tp)} g/dL" + (
            f" (above {num(th.total_protein_clue_above)}: paraprotein clue)" if high else ""))
        water = formulas.plasma_water_percent(tp, (tg or 0) / 1000, th)
        lines.append(f"- plasma water (Waugh 1969) ≈ {num(water)} % (normal about 93 %; "
                     "triglycerides stand in for total lipids)")
    lines.append("Isotonic solutes (mannitol, glycine or sorbitol irrigation) also give this "
                 "picture where recorded.")
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
        summary=(f"Osmolal gap {num(gap, 0)} mOsm/kg (measured {num(measured, 0)}, calculated "
                 f"{num(calc, 0)}): unmeasured osmoles present"),
        details=(
            f"A gap above {num(c.th.osmolal_gap_elevated_above)} mOsm/kg points to "
            "unmeasured osmoles or a falsely low sodium:",
            "- mannitol, glycine or sorbitol irrigation, radiocontrast",
            "- alcohols: ethanol, methanol, ethylene glycol, isopropanol",
            "- pseudohyponatremia (very high lipids or proteins, indirect ISE)",
            *_osmotic_agents(c),
        ),
        values=(value(V.OSMOLAL_GAP, gap), *c.osmolality_values(),
                value(V.SERUM_SODIUM, c.sodium.value)),
        inputs=c.inputs(Analyte.OSMOLALITY, Analyte.GLUCOSE, Analyte.UREA_NITROGEN),
        formulas=(*c.calculated_formula(),
                  f"Osmolal gap = {num(measured)} − {num(calc)} = {num(gap)} mOsm/kg"),
        sources=(c.th.cite("osmolal_gap_elevated_above"), c.th.cite("glucose_mg_dl_per_mmol_l")),
        next_steps=("Consider toxic alcohol screening when the history fits.",),
        cautions=(CAUTION,),
    )


# --- Urine (hypotonic only) -----------------------------------------------------------------------

def dilute_urine_finding(c: Chemistry) -> Finding | None:
    uosm = c.val(Analyte.URINE_OSMOLALITY)
    if uosm is None or uosm >= c.th.urine_osmolality_dilute_below:
        return None
    return Finding(
        code=FindingCode.DILUTE_URINE,
        urgency=Urgency.INFO,
        summary=(f"Urine osmolality {num(uosm, 0)} mOsm/kg (< "
                 f"{num(c.th.urine_osmolality_dilute_below, 0)}): maximally dilute urine, "
                 "water intake exceeds excretion"),
        details=(
            "Vasopressin is suppressed; consider primary polydipsia, low solute intake "
            "(beer, 'tea and toast') or excess hypotonic fluid.",
            *dilute_urine_lines(c.th),
        ),
        values=(value(V.URINE_OSMOLALITY, uosm), value(V.SERUM_SODIUM, c.sodium.value)),
        inputs=c.inputs(Analyte.URINE_OSMOLALITY),
        sources=(c.th.cite("urine_osmolality_dilute_below"),
                 c.th.cite("urine_osmolality_minimal")),
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
        summary=(f"Urine sodium {num(una, 0)} mmol/L (<= {num(c.th.urine_sodium_low_at_most, 0)})"
                 " in hypotonic hyponatremia: low effective arterial blood volume"),
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
    details = ["Essential criteria (Schwartz & Bartter 1957, as restated in 2014):",
               *(cr.line() for cr in essential)]
    supplemental = siadh_supplemental(c.ctx, th)
    if supplemental:
        details += ["Supplemental criteria with data:", *(cr.line() for cr in supplemental)]
    values = [value(V.URINE_OSMOLALITY, uosm), value(V.URINE_SODIUM, una),
              value(V.SERUM_SODIUM, c.sodium.value)]
    formulas_: list[str] = []
    sources = [th.cite("urine_sodium_low_at_most"), th.cite("siadh_fe_urate_above")]
    uk = c.val(Analyte.URINE_POTASSIUM)
    if uk is not None:
        ratio = formulas.urine_serum_electrolyte_ratio(una, uk, c.sodium.value)
        values.append(value(V.URINE_SERUM_ELECTROLYTE_RATIO, ratio, 2))
        formulas_.append(f"(UNa + UK) / SNa = ({num(una)} + {num(uk)}) / {num(c.sodium.value)} "
                         f"= {num(ratio, 2)}")
        advice = formulas.fluid_restriction_advice(ratio, th)
        details.append(f"Fluid restriction (Furst 2000): {advice}.")
        sources.append(th.cite("furst_ratio_high"))
        volume = c.val(Analyte.URINE_VOLUME_24H)
        if volume is not None:
            efwc = formulas.electrolyte_free_water_clearance(volume, una, uk, c.sodium.value)
            formulas_.append(f"Electrolyte-free water clearance = {num(volume, 2)} × (1 − "
                             f"{num(ratio, 2)}) = {num(efwc, 2)} L/day")
    hint = reset_osmostat_hint(c.ctx, th)
    if hint:
        details.append(hint)
    return Finding(
        code=FindingCode.SIADH_PATTERN,
        urgency=Urgency.INFO,
        summary=(f"Urine osmolality {num(uosm, 0)} and urine sodium {num(una, 0)}: SIADH pattern; "
                 f"{met} of {len(essential)} essential criteria met, {open_} open"),
        details=tuple(details),
        values=tuple(values),
        inputs=c.inputs(Analyte.OSMOLALITY, Analyte.URINE_OSMOLALITY, Analyte.URINE_SODIUM,
                        Analyte.URINE_POTASSIUM, Analyte.TSH, Analyte.CORTISOL,
                        Analyte.URIC_ACID, Analyte.UREA_NITROGEN),
        formulas=tuple(formulas_),
        sources=unique([*sources, th.cite("tonicity_hypotonic_below")]),
        missing=c.missing(Analyte.TSH, Analyte.CORTISOL, Analyte.URINE_POTASSIUM),
        next_steps=("Settle the open criteria before calling it SIADH; look for its causes "
                    "(drugs, lung or brain disease, cancer, pain, nausea).",),
        cautions=(CAUTION,),
    )


# --- Drugs and endocrine screen -----------------------------------------------------------------

def drug_associated_finding(c: Chemistry) -> Finding | None:
    matches = active_matches(c.ctx, DrugRole.ASSOCIATED)
    if not matches:
        return None
    names = list(unique([m.name for m in matches]))
    head = f"Active medications associated with hyponatremia (sodium {num(c.sodium.value)}): "
    summary = head + ", ".join(names)
    if len(summary) >= 140:
        summary = shorten(head + ", ".join(names), 120) + f" ({len(names)} drugs)"
    return Finding(
        code=FindingCode.DRUG_ASSOCIATED,
        urgency=Urgency.INFO,
        summary=summary,
        details=tuple(
            f"- **{m.name}** ({m.drug_class.label}; {m.source_id}): {m.drug_class.mechanism}"
            for m in matches
        ),
        values=(value(V.SERUM_SODIUM, c.sodium.value),),
        inputs=(used(c.sodium), *(
            InputUsed(label="Medication", value=m.display, unit="", source_id=m.source_id)
            for m in matches
        )),
        sources=unique([m.drug_class.citation for m in matches]),
        next_steps=("Review whether each drug is still needed; stop or replace it where safe.",),
        cautions=(CAUTION,),
    )


def endocrine_finding(c: Chemistry) -> Finding | None:
    missing = c.missing(Analyte.TSH, Analyte.CORTISOL)
    if not missing:
        return None
    words = " and ".join("TSH" if m == "tsh" else "cortisol" for m in missing)
    verb = "were" if len(missing) > 1 else "was"
    return Finding(
        code=FindingCode.ENDOCRINE_SCREEN,
        urgency=Urgency.INFO,
        summary=(f"Hypotonic hyponatremia: {words} {verb} not measured; hypothyroidism and "
                 "adrenal insufficiency are not yet excluded"),
        details=("Hypothyroidism and adrenal insufficiency must be excluded before SIADH can "
                 "be diagnosed (Schwartz & Bartter 1957; 2014 European guideline).",
                 "A morning cortisol is the usual first test."),
        values=(value(V.SERUM_SODIUM, c.sodium.value),),
        inputs=c.inputs(Analyte.TSH, Analyte.CORTISOL),
        sources=(c.th.cite("tonicity_hypotonic_below"), c.th.cite("tsh_upper_normal")),
        missing=missing,
        next_steps=(f"Order {words}.",),
        cautions=(CAUTION,),
    )


def workup_findings(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Patient-view findings for a low current sodium; [] when sodium is normal or missing."""
    c = chemistry(ctx, th)
    if c is None:
        return []
    found: list[Finding | None] = [tonicity_finding(c), osmolal_gap_finding(c)]
    if c.call.tonicity is Tonicity.HYPOTONIC:
        found += [dilute_urine_finding(c), low_urine_sodium_finding(c), siadh_finding(c)]
    found.append(drug_associated_finding(c))
    if c.call.tonicity is Tonicity.HYPOTONIC:
        found.append(endocrine_finding(c))
    return [f for f in found if f is not None]
