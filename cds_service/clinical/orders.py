"""Order-time findings (order-select, order-sign): fluids, hypertonic saline, drugs, vaptans.

Only drafts with ``selected=True`` are judged; the others are context. A finding that
suggests deleting a draft names it in ``remove_draft``.
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical._data import cite
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult
from cds_service.clinical.correction import CorrectionLimits, applicable_limits, risen_last_24h
from cds_service.clinical.drugs import DrugMatch, DrugRole, draft_matches
from cds_service.clinical.findings import (
    Finding,
    FindingCode,
    InputUsed,
    Urgency,
    Value,
    ValueName,
)
from cds_service.clinical.infusates import FluidTonicity, ResolvedFluid, resolve
from cds_service.clinical.notes import CAUTION, num, shorten, signed, unique, used, value
from cds_service.clinical.thresholds import Thresholds
from cds_service.clinical.treatment import BodyWater, InfusionEffect, body_water, infusion_effect

V = ValueName


@dataclass(frozen=True, slots=True)
class OrderContext:
    ctx: ClinicalContext
    th: Thresholds
    sodium: LabResult | None
    water: BodyWater | None
    limits: CorrectionLimits
    risen_24h: float = 0.0

    @property
    def hyponatremic(self) -> bool:
        return self.sodium is not None and self.sodium.value < self.th.sodium_lower_normal

    def effect(self, fluid: ResolvedFluid) -> InfusionEffect | None:
        if self.sodium is None or self.water is None:
            return None
        return infusion_effect(
            fluid, self.sodium.value, self.water.litres, self.limits.limit_24h, self.risen_24h
        )

    def arithmetic(self, fluid: ResolvedFluid) -> tuple[list[Value], list[str], list[str]]:
        """(values, formula lines, detail lines) of a fluid's predicted effect."""
        if self.sodium is None or self.water is None:
            why = "serum sodium" if self.sodium is None else "body weight"
            return [], [], [f"The change per litre needs a recorded {why}; not computed."]
        effect = self.effect(fluid)
        assert effect is not None
        values = [
            value(V.TOTAL_BODY_WATER, effect.tbw),
            value(V.DELTA_SODIUM_PER_LITER, effect.delta_per_liter),
        ]
        return values, [*self.water.lines(), *effect.lines()], list(self.water.notes())

    def inputs(self) -> tuple[InputUsed, ...]:
        labs = (self.sodium, self.ctx.current.get(Analyte.BODY_WEIGHT))
        return tuple(used(r) for r in labs if r is not None)

    def sodium_input(self) -> tuple[InputUsed, ...]:
        return () if self.sodium is None else (used(self.sodium),)

    def sodium_values(self) -> list[Value]:
        return [] if self.sodium is None else [value(V.SERUM_SODIUM, self.sodium.value)]

    def sources(self) -> list[str]:
        return [self.th.cite("tbw_fraction_adult_male")]


def _selected_fluids(ctx: ClinicalContext, th: Thresholds) -> list[ResolvedFluid]:
    resolved = (resolve(d, th) for d in ctx.draft_fluids if d.selected)
    return [r for r in resolved if r is not None]


def _na(o: OrderContext) -> str:
    return "unknown" if o.sodium is None else f"{num(o.sodium.value)} mmol/L"


def hypotonic_fluid_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    hypo = [f for f in fluids if f.tonicity is FluidTonicity.HYPOTONIC]
    if not o.hyponatremic or not hypo:
        return None
    first = hypo[0]
    values, formula_lines, notes = o.arithmetic(first)
    return Finding(
        code=FindingCode.HYPOTONIC_FLUID_ORDER,
        urgency=Urgency.WARNING,
        summary=(
            f"{shorten(first.label, 45)} drafted while sodium is {_na(o)}: a hypotonic "
            "fluid lowers sodium further"
        ),
        details=(
            *(
                f"- {f.label} ({f.draft.resource_id}): Na + K {num(f.sodium_plus_potassium)} "
                "mmol/L, hypotonic"
                for f in hypo
            ),
            *notes,
        ),
        values=(*o.sodium_values(), *values),
        inputs=o.inputs(),
        formulas=tuple(formula_lines),
        sources=unique([*o.sources(), o.th.cite("infusate_hypotonic_below")]),
        next_steps=(
            "Remove the draft; if fluid is needed choose an isotonic one and recheck sodium.",
        ),
        cautions=(CAUTION,),
        remove_draft=first.draft.resource_id,
    )


def isotonic_fluid_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    iso = [f for f in fluids if f.tonicity is FluidTonicity.ISOTONIC and f.sodium > 0]
    if not o.hyponatremic or not iso:
        return None
    first = iso[0]
    values, formula_lines, notes = o.arithmetic(first)
    uosm = o.ctx.current.get(Analyte.URINE_OSMOLALITY)
    osm = num(first.osmolarity, 0)
    if uosm is None:
        urine = (
            f"Urine osmolality not known: if it exceeds this fluid's {osm} mOsm/L "
            "(as in SIADH), the salt leaves in less water and sodium can fall."
        )
    elif uosm.value > first.osmolarity:
        urine = (
            f"Urine osmolality {num(uosm.value, 0)} mOsm/kg exceeds this fluid's {osm} "
            "mOsm/L: the salt leaves in less water and sodium can fall (as in SIADH)."
        )
    else:
        urine = (
            f"Urine osmolality {num(uosm.value, 0)} mOsm/kg is below this fluid's {osm} "
            "mOsm/L: net water excretion, sodium should rise."
        )
    effect = o.effect(first)
    per_l = f"; expected {signed(effect.delta_per_liter)} mmol/L per litre" if effect else ""
    return Finding(
        code=FindingCode.ISOTONIC_FLUID_ORDER,
        urgency=Urgency.INFO,
        summary=shorten(f"{shorten(first.label, 40)} drafted while sodium is {_na(o)}{per_l}", 139),
        details=(urine, *notes),
        values=(
            *o.sodium_values(),
            *values,
            *([value(V.URINE_OSMOLALITY, uosm.value)] if uosm else []),
        ),
        inputs=o.inputs() + ((used(uosm),) if uosm else ()),
        formulas=tuple(formula_lines),
        sources=unique(o.sources()),
        missing=() if uosm else (Analyte.URINE_OSMOLALITY.value,),
        next_steps=("Recheck sodium within a few hours of starting the infusion.",),
        cautions=(CAUTION,),
    )


def hypertonic_saline_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    hyper = [f for f in fluids if f.tonicity is FluidTonicity.HYPERTONIC]
    if not hyper:
        return None
    th, first = o.th, hyper[0]
    values, formula_lines, notes = o.arithmetic(first)
    effect = o.effect(first)
    limit = num(o.limits.limit_24h)
    summary = f"{shorten(first.label, 30)} drafted (sodium {_na(o)})"
    details = list(notes)
    cautions = [
        CAUTION,
        "The formula ignores urine and other losses: the real rise can be "
        "larger, above all once a reversible cause of water retention is removed.",
    ]
    if effect is not None:
        values.append(value(V.CORRECTION_LIMIT_24H, o.limits.limit_24h))
        summary += f": {signed(effect.delta_per_liter)} mmol/L per litre"
        if effect.max_volume_24h is not None:
            values.append(value(V.MAX_VOLUME_24H, effect.max_volume_24h, 2))
            if effect.headroom_24h == 0:
                summary += f"; the {limit} mmol/L 24-h limit is already used"
            else:
                summary += (
                    f", {num(effect.max_volume_24h, 2)} L reaches the {limit} mmol/L 24-h limit"
                )
        rise = effect.projected_rise_24h
        if rise is not None and rise > o.limits.limit_24h:
            cautions.append(
                f"As drafted the projected 24-h rise is {signed(rise)} mmol/L, above "
                f"the {limit} mmol/L limit."
            )
    if o.limits.high_risk_reasons:
        details.append("High-risk limit applies: " + "; ".join(o.limits.high_risk_reasons) + ".")
    details.append(
        f"Reference only, not ordered: for severe symptoms the 2014 European guideline gives "
        f"{num(th.bolus_hypertonic_volume, 0)} mL of 3% saline over "
        f"{num(th.bolus_hypertonic_minutes, 0)} min, repeated until sodium rises "
        f"{num(th.bolus_target_rise, 0)} mmol/L."
    )
    return Finding(
        code=FindingCode.HYPERTONIC_SALINE_ORDER,
        urgency=Urgency.WARNING,
        summary=shorten(summary, 139),
        details=tuple(details),
        values=(*o.sodium_values(), *values),
        inputs=o.inputs(),
        formulas=tuple(formula_lines),
        sources=unique(
            [*o.sources(), th.cite("correction_limit_24h"), th.cite("bolus_hypertonic_volume")]
        ),
        next_steps=("Check sodium every few hours while it runs, per local protocol.",),
        cautions=tuple(cautions),
    )


def _drug_lines(matches: list[DrugMatch]) -> tuple[str, ...]:
    return tuple(
        f"- **{m.name}** ({m.drug_class.label}; {m.source_id}): {m.drug_class.mechanism}"
        for m in matches
    )


def drug_order_finding(o: OrderContext) -> Finding | None:
    matches = draft_matches(o.ctx, DrugRole.ASSOCIATED)
    if not o.hyponatremic or not matches:
        return None
    first = matches[0]
    return Finding(
        code=FindingCode.DRUG_ORDER_RISK,
        urgency=Urgency.WARNING,
        summary=shorten(
            f"{first.name.capitalize()} drafted while sodium is {_na(o)}: "
            f"{first.drug_class.label}, associated with hyponatremia",
            139,
        ),
        details=_drug_lines(matches),
        values=tuple(o.sodium_values()),
        inputs=o.sodium_input(),
        sources=unique([m.drug_class.citation for m in matches]),
        next_steps=("Consider an alternative, or recheck sodium soon after starting.",),
        cautions=(CAUTION,),
        remove_draft=first.source_id,
    )


def vaptan_finding(o: OrderContext) -> Finding | None:
    matches = draft_matches(o.ctx, DrugRole.VAPTAN)
    if not matches:
        return None
    first = matches[0]
    cautions = [
        CAUTION,
        "Overcorrection risk: check sodium every 6-8 h in the first 24-48 h, or as the "
        "product label and local protocol say.",
        "Do not restrict fluid in the first 24 h; let the patient drink to thirst.",
        "Liver injury reported with tolvaptan: avoid in liver disease; limit to 30 days.",
        "Not for hypovolemic hyponatremia, nor for urgent treatment of severe symptoms.",
    ]
    details = list(_drug_lines(matches))
    if o.limits.high_risk_reasons:
        details.append("High-risk limit applies: " + "; ".join(o.limits.high_risk_reasons) + ".")
    values = [*o.sodium_values(), value(V.CORRECTION_LIMIT_24H, o.limits.limit_24h)]
    return Finding(
        code=FindingCode.VAPTAN_ORDER,
        urgency=Urgency.WARNING,
        summary=shorten(
            f"{first.name.capitalize()} drafted (sodium {_na(o)}): risk of "
            "overcorrection; frequent sodium checks, no fluid restriction at first",
            139,
        ),
        details=tuple(details),
        values=tuple(values),
        inputs=o.sodium_input(),
        sources=unique(
            [first.drug_class.citation, o.th.cite("correction_limit_24h"), cite("samsca_label")]
        ),
        next_steps=("Plan sodium checks and a limit before the first dose.",),
        cautions=tuple(cautions),
    )


def order_findings(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Findings about the selected draft orders."""
    o = OrderContext(
        ctx,
        th,
        ctx.current.get(Analyte.SODIUM),
        body_water(ctx, th),
        applicable_limits(ctx, th),
        risen_last_24h(ctx),
    )
    fluids = _selected_fluids(ctx, th)
    found = [
        hypotonic_fluid_finding(o, fluids),
        isotonic_fluid_finding(o, fluids),
        hypertonic_saline_finding(o, fluids),
        drug_order_finding(o),
        vaptan_finding(o),
    ]
    return [f for f in found if f is not None]
