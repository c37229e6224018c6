"""The hypotonic branch: urine interpretation, SIADH criteria, reset osmostat, volume hints.

SIADH essential criteria follow Schwartz & Bartter 1957 as restated by the 2014 European
guideline (Spasovski 2014); each is met, not met or unknown from what the record shows.
Clinical euvolaemia is a bedside judgement: the record only gives hints, never a verdict.
Thyroid: only overt hypothyroidism (raised TSH with low free T4) excludes SIADH; adrenal: only a
morning cortisol (by the draw time) is read; renal: eGFR (laboratory or CKD-EPI 2021) as well as
problem-list codes.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from enum import StrEnum

from cds_service.clinical import formulas
from cds_service.clinical.chemistry import Chemistry
from cds_service.clinical.context import Analyte, ClinicalContext, ConditionCategory, LabResult
from cds_service.clinical.drugs import DrugMatch, DrugRole, active_matches
from cds_service.clinical.notes import num, qty
from cds_service.clinical.thresholds import Thresholds


class Status(StrEnum):
    MET = "met"
    NOT_MET = "not met"
    UNKNOWN = "unknown"


_MARK = {Status.MET: "✓ met", Status.NOT_MET: "✗ not met", Status.UNKNOWN: "? unknown"}


@dataclass(frozen=True, slots=True)
class Criterion:
    name: str
    status: Status
    evidence: str

    def line(self) -> str:
        return f"- {_MARK[self.status]}: {self.name} ({self.evidence})"


_VOLUME_HINTS: dict[ConditionCategory, str] = {
    ConditionCategory.HEART_FAILURE: "heart failure recorded: consider hypervolemic hyponatremia",
    ConditionCategory.CIRRHOSIS: "cirrhosis or advanced liver disease recorded: consider "
    "hypervolemic hyponatremia",
    ConditionCategory.NEPHROTIC_SYNDROME: "nephrotic syndrome recorded: consider hypervolemic "
    "hyponatremia",
    ConditionCategory.ADVANCED_KIDNEY_DISEASE: "advanced kidney disease recorded: water "
    "excretion is limited and urine sodium is hard to interpret",
    ConditionCategory.VOMITING_DIARRHEA: "vomiting or diarrhea recorded: consider hypovolemia "
    "(extrarenal losses)",
}


def recent_diuretics(ctx: ClinicalContext) -> list[DrugMatch]:
    """Active medications of a diuretic class."""
    return [m for m in active_matches(ctx, DrugRole.ASSOCIATED) if m.drug_class.diuretic]


def volume_hints(ctx: ClinicalContext) -> tuple[str, ...]:
    """Hints for the bedside volume assessment from problems and recent diuretics."""
    hints = [text for cat, text in _VOLUME_HINTS.items() if ctx.has_condition(cat)]
    hints.extend(
        f"{m.name} ({m.drug_class.label}) active: renal salt loss possible, and urine sodium "
        "is raised while it acts"
        for m in recent_diuretics(ctx)
    )
    return tuple(hints)


def volume_hint_lines(ctx: ClinicalContext) -> tuple[str, ...]:
    hints = volume_hints(ctx)
    if not hints:
        return ("Volume status: nothing in the record hints either way; assess at the bedside.",)
    return ("Hints for the bedside volume assessment (not a verdict):", *(f"- {h}" for h in hints))


def _value(ctx: ClinicalContext, analyte: Analyte) -> float | None:
    result = ctx.current.get(analyte)
    return None if result is None else result.value


#: Conditions that can cause SIADH (Spasovski 2014, table of causes of SIAD), as card text.
SIADH_TRIGGERS: dict[ConditionCategory, str] = {
    ConditionCategory.MALIGNANCY: "malignancy",
    ConditionCategory.CNS_DISORDER: "central nervous system disorder",
    ConditionCategory.PULMONARY_DISEASE: "pulmonary disease",
    ConditionCategory.NAUSEA: "nausea",
    ConditionCategory.PAIN: "pain",
    ConditionCategory.POSTOPERATIVE: "postoperative state",
}


def siadh_triggers(ctx: ClinicalContext) -> list[str]:
    """SIADH triggers the problem list shows: 'pulmonary disease (Pneumonia, Condition/x)'."""
    out = []
    for category, label in SIADH_TRIGGERS.items():
        entries = [c for c in ctx.conditions if c.category == category]
        if entries:
            shown = ", ".join(f"{e.display}, {e.source_id}" for e in entries[:2])
            out.append(f"{label} ({shown})")
    return out


def is_morning(result: LabResult, th: Thresholds) -> bool:
    """Drawn within the morning window, by the clock time of the draw as recorded."""
    t = result.time
    hour = t.hour + t.minute / 60
    return th.cortisol_morning_from_hour <= hour < th.cortisol_morning_until_hour


def random_cortisol_line(c: Chemistry) -> str | None:
    """A cortisol drawn outside the morning window is not read as a morning value. (Whether a
    card appears never depends on the clock hour: sample timelines are moved in time.)"""
    cortisol = c.lab(Analyte.CORTISOL)
    if cortisol is None or is_morning(cortisol, c.th):
        return None
    return (
        f"The cortisol on record was drawn at {cortisol.time:%H:%M} (clock time as recorded), "
        f"outside the morning window {num(c.th.cortisol_morning_from_hour)}:00-"
        f"{num(c.th.cortisol_morning_until_hour)}:00: a random cortisol is not read as a "
        "morning value and neither confirms nor excludes adrenal insufficiency; a morning "
        "cortisol settles it."
    )


def _thyroid(ctx: ClinicalContext, th: Thresholds) -> tuple[Status, str]:
    tsh, ft4 = _value(ctx, Analyte.TSH), _value(ctx, Analyte.FREE_T4)
    d = ctx.display_units
    recorded = ctx.has_condition(ConditionCategory.HYPOTHYROIDISM)
    if (
        ft4 is not None
        and ft4 < th.free_t4_lower_normal
        and (tsh is None or tsh <= th.tsh_upper_normal)
    ):
        return Status.NOT_MET, (
            f"free T4 {qty(ft4, Analyte.FREE_T4, d)} low without a raised TSH: central "
            "(pituitary) hypothyroidism possible"
        )
    if tsh is None:
        if recorded:
            return (
                Status.UNKNOWN,
                "hypothyroidism recorded, TSH not measured: overt or not is unknown",
            )
        return Status.UNKNOWN, "TSH not measured"
    tsh_text = f"TSH {qty(tsh, Analyte.TSH, d)}"
    if tsh <= th.tsh_upper_normal:
        return Status.MET, f"{tsh_text} not raised"
    if ft4 is None:
        return Status.UNKNOWN, (
            f"{tsh_text} raised, free T4 not measured: only overt hypothyroidism (low free T4) "
            "excludes SIADH"
        )
    ft4_text = f"free T4 {qty(ft4, Analyte.FREE_T4, d)}"
    if ft4 < th.free_t4_lower_normal:
        return Status.NOT_MET, f"overt hypothyroidism: {tsh_text} raised with {ft4_text} low"
    return Status.MET, (
        f"{tsh_text} raised with {ft4_text} normal: subclinical, does not exclude SIADH"
    )


def _adrenal(ctx: ClinicalContext, th: Thresholds) -> tuple[Status, str]:
    if ctx.has_condition(ConditionCategory.ADRENAL_INSUFFICIENCY):
        return Status.NOT_MET, "adrenal insufficiency recorded"
    result = ctx.current.get(Analyte.CORTISOL)
    if result is None:
        return Status.UNKNOWN, "cortisol not measured"
    text = qty(result.value, Analyte.CORTISOL, ctx.display_units)
    if not is_morning(result, th):
        return Status.UNKNOWN, (
            f"cortisol {text} drawn at {result.time:%H:%M} is not a morning value (window "
            f"{num(th.cortisol_morning_from_hour)}:00-{num(th.cortisol_morning_until_hour)}:00 "
            "by the draw time as recorded): it neither confirms nor excludes adrenal insufficiency"
        )
    if result.value <= th.cortisol_adrenal_unlikely_above:
        return Status.UNKNOWN, (f"morning cortisol {text} does not exclude adrenal insufficiency")
    return Status.MET, f"morning cortisol {text}"


def _renal(c: Chemistry) -> tuple[Status, str]:
    if c.ctx.has_condition(ConditionCategory.ADVANCED_KIDNEY_DISEASE):
        return Status.NOT_MET, "advanced kidney disease recorded"
    if c.egfr is None:
        return Status.UNKNOWN, c.egfr_note
    text = f"eGFR {num(c.egfr, 0)} mL/min/1.73 m² ({c.egfr_note})"
    if c.egfr < c.th.renal_insufficiency_egfr_below:
        return Status.NOT_MET, (
            f"{text}: renal insufficiency (below {num(c.th.renal_insufficiency_egfr_below)})"
        )
    return Status.MET, text


def _criterion_5(c: Chemistry) -> Criterion:
    name = "no adrenal, thyroid, pituitary or renal insufficiency"
    parts = [_thyroid(c.ctx, c.th), _adrenal(c.ctx, c.th), _renal(c)]
    statuses = {status for status, _ in parts}
    if Status.NOT_MET in statuses:
        status = Status.NOT_MET
        shown = [text for st, text in parts if st is Status.NOT_MET]
    else:
        status = Status.UNKNOWN if Status.UNKNOWN in statuses else Status.MET
        shown = [text for _, text in parts]
        if status is Status.MET:
            shown.append("pituitary as far as these show")
    return Criterion(name, status, "; ".join(shown))


def _criterion_1(c: Chemistry) -> Criterion:
    th = c.th
    name = f"effective osmolality < {num(th.tonicity_hypotonic_below)} mOsm/kg"
    effective, measured = c.call.effective_osmolality, c.measured_osmolality
    if effective is None or measured is None:
        return Criterion(name, Status.UNKNOWN, "not measured")
    shown = f"effective {num(effective)} mOsm/kg (measured {num(measured)})"
    if c.call.residual:
        return Criterion(
            name,
            Status.UNKNOWN,
            f"{shown} includes glucose; the glucose-corrected sodium "
            f"{num(c.corrected_hillier or 0)} mmol/L is still low",
        )
    ok = effective < th.tonicity_hypotonic_below
    return Criterion(name, Status.MET if ok else Status.NOT_MET, shown)


def siadh_essential(c: Chemistry) -> tuple[Criterion, ...]:
    """The six essential criteria, each met / not met / unknown."""
    ctx, th = c.ctx, c.th
    uosm = _value(ctx, Analyte.URINE_OSMOLALITY)
    una = _value(ctx, Analyte.URINE_SODIUM)

    def threshold(name: str, x: float | None, ok: bool, text: str) -> Criterion:
        if x is None:
            return Criterion(name, Status.UNKNOWN, "not measured")
        return Criterion(name, Status.MET if ok else Status.NOT_MET, text)

    diuretics = recent_diuretics(ctx)
    hints = [h for h in volume_hints(ctx) if "active" not in h]
    return (
        _criterion_1(c),
        threshold(
            f"urine osmolality > {num(th.urine_osmolality_dilute_at_most)} mOsm/kg",
            uosm,
            uosm is not None and uosm > th.urine_osmolality_dilute_at_most,
            f"{num(uosm or 0)} mOsm/kg",
        ),
        Criterion(
            "clinical euvolemia",
            Status.UNKNOWN,
            "bedside assessment" + (f"; record hints: {'; '.join(hints)}" if hints else ""),
        ),
        threshold(
            f"urine sodium > {num(th.urine_sodium_low_at_most)} mmol/L with normal salt and "
            "water intake",
            una,
            una is not None and una > th.urine_sodium_low_at_most,
            f"{num(una or 0)} mmol/L",
        ),
        _criterion_5(c),
        Criterion(
            "no recent diuretic use",
            Status.NOT_MET if diuretics else Status.MET,
            ", ".join(m.name for m in diuretics) + " active"
            if diuretics
            else "no diuretic in the medication record",
        ),
    )


def fractional_excretions(ctx: ClinicalContext) -> dict[str, float]:
    """FE (%) of uric acid, urea and sodium where urine and serum values and both creatinines
    are measured: keys "uric acid", "urea", "sodium"."""
    creat, ucreat = _value(ctx, Analyte.CREATININE), _value(ctx, Analyte.URINE_CREATININE)
    out: dict[str, float] = {}
    if not creat or not ucreat:
        return out
    for label, urine, serum in (
        ("uric acid", Analyte.URINE_URIC_ACID, Analyte.URIC_ACID),
        ("urea", Analyte.URINE_UREA_NITROGEN, Analyte.UREA_NITROGEN),
        ("sodium", Analyte.URINE_SODIUM, Analyte.SODIUM),
    ):
        u, s = _value(ctx, urine), _value(ctx, serum)
        if u is not None and s:
            out[label] = formulas.fractional_excretion(u, s, ucreat, creat)
    return out


def siadh_supplemental(ctx: ClinicalContext, th: Thresholds) -> tuple[Criterion, ...]:
    """Supplemental criteria for which the record has data (others are left out)."""
    out: list[Criterion] = []
    for label, analyte, below in (
        ("serum uric acid", Analyte.URIC_ACID, th.siadh_uric_acid_below),
        ("urea nitrogen", Analyte.UREA_NITROGEN, th.siadh_urea_nitrogen_below),
    ):
        measured = _value(ctx, analyte)
        if measured is not None:
            out.append(
                Criterion(
                    f"{label} < {num(below)} mg/dL",
                    Status.MET if measured < below else Status.NOT_MET,
                    f"{num(measured)} mg/dL",
                )
            )
    limits = {
        "uric acid": th.siadh_fe_urate_above,
        "urea": th.siadh_fe_urea_above,
        "sodium": th.siadh_fe_sodium_above,
    }
    diuretic = bool(recent_diuretics(ctx))
    for label, fe in fractional_excretions(ctx).items():
        note = (
            "; a diuretic is active, so it is unreliable" if diuretic and label == "sodium" else ""
        )
        out.append(
            Criterion(
                f"fractional excretion of {label} > {num(limits[label])} %",
                Status.MET if fe > limits[label] else Status.NOT_MET,
                f"{num(fe, 2 if fe < 1 else 1)} %{note}",
            )
        )
    return tuple(out)


def reset_osmostat_hint(ctx: ClinicalContext, th: Thresholds) -> str | None:
    """A consideration when every sodium over at least N days is mild and stable."""
    series = ctx.series.get(Analyte.SODIUM, ())
    if len(series) < 2:
        return None
    span = max(r.time for r in series) - min(r.time for r in series)
    values = [r.value for r in series]
    if span < timedelta(days=th.reset_osmostat_min_days):
        return None
    if min(values) < th.severity_mild_lower or max(values) >= th.sodium_lower_normal:
        return None
    if max(values) - min(values) > th.reset_osmostat_max_range:
        return None
    return (
        f"Sodium has stayed mild and stable ({num(min(values))}-{num(max(values))} mmol/L over "
        f"{span.days} days): a reset osmostat is a consideration (water-load test confirms)."
    )


def dilute_urine_lines(
    th: Thresholds, urine_osmolality: float | None = None, urine_volume_l: float | None = None
) -> tuple[str, ...]:
    """Maximum daily urine volume at the minimal urine osmolality for two solute loads, and
    for the patient's own solute excretion when a 24-h urine volume is known."""
    minimal = num(th.urine_osmolality_minimal)
    typical = formulas.max_urine_volume(th.solute_load_typical, th.urine_osmolality_minimal)
    low = formulas.max_urine_volume(th.solute_load_low, th.urine_osmolality_minimal)
    lines = [
        f"Maximum urine volume = daily solute load / minimal urine osmolality: "
        f"{num(th.solute_load_typical)} / {minimal} = {num(typical)} L/day on a usual diet; "
        f"{num(th.solute_load_low)} / {minimal} = {num(low)} L/day on a low-solute diet."
    ]
    if urine_osmolality is not None and urine_volume_l is not None:
        solute = urine_osmolality * urine_volume_l
        own = formulas.max_urine_volume(solute, th.urine_osmolality_minimal)
        lines.append(
            f"This patient's solute excretion = {num(urine_osmolality)} × {num(urine_volume_l, 2)}"
            f" L = {num(solute, 0)} mOsm/day, allowing at most {num(own)} L/day of urine."
        )
    return tuple(lines)
