"""The hypotonic branch: urine interpretation, SIADH criteria, reset osmostat, volume hints.

SIADH essential criteria follow Schwartz & Bartter 1957 as restated by the 2014 European
guideline (Spasovski 2014); each is met, not met or unknown from what the record shows.
Clinical euvolaemia is a bedside judgement: the record only gives hints, never a verdict.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from enum import StrEnum

from cds_service.clinical import formulas
from cds_service.clinical.context import Analyte, ClinicalContext, ConditionCategory
from cds_service.clinical.drugs import DrugMatch, DrugRole, active_matches
from cds_service.clinical.notes import num
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


def _criterion_5(ctx: ClinicalContext, th: Thresholds) -> Criterion:
    name = "no adrenal, thyroid, pituitary or renal insufficiency"
    recorded = [
        label
        for cat, label in (
            (ConditionCategory.HYPOTHYROIDISM, "hypothyroidism"),
            (ConditionCategory.ADRENAL_INSUFFICIENCY, "adrenal insufficiency"),
            (ConditionCategory.ADVANCED_KIDNEY_DISEASE, "advanced kidney disease"),
        )
        if ctx.has_condition(cat)
    ]
    if recorded:
        return Criterion(name, Status.NOT_MET, f"{', '.join(recorded)} recorded")
    tsh, cortisol = _value(ctx, Analyte.TSH), _value(ctx, Analyte.CORTISOL)
    if tsh is not None and tsh > th.tsh_upper_normal:
        return Criterion(name, Status.NOT_MET, f"TSH {num(tsh, 2)} m[IU]/L is raised")
    if tsh is None or cortisol is None:
        missing = " and ".join(n for n, v in (("TSH", tsh), ("cortisol", cortisol)) if v is None)
        return Criterion(name, Status.UNKNOWN, f"{missing} not measured")
    if cortisol <= th.cortisol_adrenal_unlikely_above:
        return Criterion(
            name,
            Status.UNKNOWN,
            f"cortisol {num(cortisol)} ug/dL does not exclude adrenal insufficiency",
        )
    return Criterion(
        name,
        Status.MET,
        f"TSH {num(tsh, 2)} m[IU]/L, cortisol {num(cortisol)} ug/dL; "
        "pituitary as far as these show",
    )


def siadh_essential(ctx: ClinicalContext, th: Thresholds) -> tuple[Criterion, ...]:
    """The six essential criteria, each met / not met / unknown."""
    osm = _value(ctx, Analyte.OSMOLALITY)
    uosm = _value(ctx, Analyte.URINE_OSMOLALITY)
    una = _value(ctx, Analyte.URINE_SODIUM)

    def threshold(name: str, x: float | None, ok: bool, text: str) -> Criterion:
        if x is None:
            return Criterion(name, Status.UNKNOWN, "not measured")
        return Criterion(name, Status.MET if ok else Status.NOT_MET, text)

    diuretics = recent_diuretics(ctx)
    hints = [h for h in volume_hints(ctx) if "active" not in h]
    return (
        threshold(
            f"effective osmolality < {num(th.tonicity_hypotonic_below)} mOsm/kg",
            osm,
            osm is not None and osm < th.tonicity_hypotonic_below,
            f"measured {num(osm or 0)} mOsm/kg",
        ),
        threshold(
            f"urine osmolality > {num(th.urine_osmolality_dilute_below)} mOsm/kg",
            uosm,
            uosm is not None and uosm > th.urine_osmolality_dilute_below,
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
        _criterion_5(ctx, th),
        Criterion(
            "no recent diuretic use",
            Status.NOT_MET if diuretics else Status.MET,
            ", ".join(m.name for m in diuretics) + " active"
            if diuretics
            else "no diuretic in the medication record",
        ),
    )


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
    creat, ucreat = _value(ctx, Analyte.CREATININE), _value(ctx, Analyte.URINE_CREATININE)
    for label, urine, serum, limit in (
        ("uric acid", Analyte.URINE_URIC_ACID, Analyte.URIC_ACID, th.siadh_fe_urate_above),
        ("urea", Analyte.URINE_UREA_NITROGEN, Analyte.UREA_NITROGEN, th.siadh_fe_urea_above),
    ):
        u, s = _value(ctx, urine), _value(ctx, serum)
        if None in (u, s, creat, ucreat) or not s or not ucreat:
            continue
        fe = formulas.fractional_excretion(u, s, ucreat, creat)  # type: ignore[arg-type]
        out.append(
            Criterion(
                f"fractional excretion of {label} > {num(limit)} %",
                Status.MET if fe > limit else Status.NOT_MET,
                f"{num(fe)} %",
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
