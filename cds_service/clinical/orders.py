"""Order-time findings (order-select, order-sign): fluids, hypertonic saline, potassium, drugs,
vaptans.

Only drafts with ``selected=True`` are judged; the others are context. A finding that
suggests deleting a draft names it in ``remove_draft``. When sodium has already risen above a
correction limit (the re-lowering context), every card reads the draft against that plan:
electrolyte-free water is what the guidelines advise (its effect and the re-lowering amounts
are shown, never "remove the draft"); anything that raises sodium is flagged as working
against it (Spasovski 2014, section 8.5).
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical._data import cite
from cds_service.clinical.context import Analyte, ClinicalContext, ConditionCategory, LabResult
from cds_service.clinical.correction import (
    CorrectionLimits,
    applicable_limits,
    relowering_values,
    risen_last_24h,
    surveil,
)
from cds_service.clinical.drugs import DrugMatch, DrugRole, draft_matches
from cds_service.clinical.findings import (
    Finding,
    FindingCode,
    InputUsed,
    Urgency,
    Value,
    ValueName,
)
from cds_service.clinical.infusates import (
    FluidTonicity,
    ResolvedFluid,
    potassium_salts,
    resolve,
)
from cds_service.clinical.notes import CAUTION, num, qty, shorten, signed, unique, used, value
from cds_service.clinical.thresholds import Thresholds
from cds_service.clinical.treatment import (
    UNCHECKED_PATIENT,
    BodyWater,
    InfusionEffect,
    Presentation,
    body_water,
    hypertonic_indication,
    infusion_effect,
    low_solute_line,
    presentation,
)

V = ValueName

_OVERCORRECTED = (
    "Sodium has already risen above the correction limit (see the correction card): "
    "the plan is to stop the rise and consider re-lowering, not to raise sodium."
)


@dataclass(frozen=True, slots=True)
class OrderContext:
    ctx: ClinicalContext
    th: Thresholds
    sodium: LabResult | None
    water: BodyWater | None
    limits: CorrectionLimits
    risen_24h: float = 0.0
    overcorrected: bool = False
    presentation: Presentation | None = None

    @property
    def hyponatremic(self) -> bool:
        return self.sodium is not None and self.sodium.value < self.th.sodium_lower_normal

    @property
    def computable(self) -> bool:
        """Body-water arithmetic needs a sodium, a weight and a checked age and sex."""
        return self.sodium is not None and self.water is not None and self.ctx.patient.known

    def effect(self, fluid: ResolvedFluid, goal: bool = False) -> InfusionEffect | None:
        if not self.computable:
            return None
        assert self.sodium is not None and self.water is not None
        return infusion_effect(
            fluid,
            self.sodium.value,
            self.water.litres,
            self.limits.next_24h,
            self.risen_24h,
            self.limits.goal_high if goal else None,
        )

    def arithmetic(
        self, fluid: ResolvedFluid, goal: bool = False
    ) -> tuple[list[Value], list[str], list[str]]:
        """(values, formula lines, detail lines) of a fluid's predicted effect."""
        if not self.ctx.patient.known:
            return [], [], [UNCHECKED_PATIENT]
        if self.sodium is None or self.water is None:
            why = "serum sodium" if self.sodium is None else "body weight"
            return [], [], [f"The change per litre needs a recorded {why}; not computed."]
        effect = self.effect(fluid, goal)
        assert effect is not None
        values = [
            value(V.TOTAL_BODY_WATER, effect.tbw),
            value(V.DELTA_SODIUM_PER_LITER, effect.delta_per_liter),
        ]
        return values, [*self.water.lines(), *effect.lines()], list(self.water.notes())

    def potassium_line(self, fluid: ResolvedFluid) -> list[str]:
        """Potassium in a fluid counts like sodium (Adrogué–Madias numerator, Na + K)."""
        if fluid.potassium <= 0:
            return []
        line = (
            f"Its {num(fluid.potassium)} mmol/L potassium raises sodium as sodium does: the "
            "Adrogué–Madias numerator is the infusate's Na + K (Adrogué 2000)"
        )
        if self.computable:
            assert self.water is not None
            line += f", {signed(fluid.potassium / (self.water.litres + 1))} mmol/L per litre"
        return [line + "; it counts toward the correction limit."]

    def inputs(self) -> tuple[InputUsed, ...]:
        labs = (self.sodium, self.ctx.current.get(Analyte.BODY_WEIGHT))
        return tuple(used(r) for r in labs if r is not None)

    def sodium_input(self) -> tuple[InputUsed, ...]:
        return () if self.sodium is None else (used(self.sodium),)

    def sodium_values(self) -> list[Value]:
        return [] if self.sodium is None else [value(V.SERUM_SODIUM, self.sodium.value)]

    def sources(self) -> list[str]:
        return [self.th.cite("tbw_fraction_adult_male")]

    def extra_lines(self) -> list[str]:
        line = low_solute_line(self.ctx, self.th)
        return [line] if line else []


def _selected_fluids(ctx: ClinicalContext, th: Thresholds) -> list[ResolvedFluid]:
    resolved = (resolve(d, th) for d in ctx.draft_fluids if d.selected)
    return [r for r in resolved if r is not None]


def _na(o: OrderContext) -> str:
    return (
        "unknown" if o.sodium is None else qty(o.sodium.value, Analyte.SODIUM, o.ctx.display_units)
    )


def _relowering_finding(o: OrderContext, first: ResolvedFluid, hypo: list) -> Finding:
    """Electrolyte-free water drafted after overcorrection: what the guidelines advise."""
    values, formula_lines, notes = o.arithmetic(first)
    effect = o.effect(first)
    relower_values, relower_lines = relowering_values(o.ctx, o.th)
    per_l = f": {signed(effect.delta_per_liter)} mmol/L per litre" if effect else ""
    return Finding(
        code=FindingCode.HYPOTONIC_FLUID_ORDER,
        urgency=Urgency.INFO,
        summary=shorten(
            f"{shorten(first.label, 40)} drafted after overcorrection fits re-lowering{per_l}",
            139,
        ),
        details=(
            _OVERCORRECTED,
            "Electrolyte-free water is what the 2014 European guideline advises for re-lowering "
            "(section 8.5), with an expert and under close monitoring.",
            *(
                f"- {f.label} ({f.draft.resource_id}): Na + K {num(f.sodium_plus_potassium)} mmol/L"
                for f in hypo
            ),
            *o.potassium_line(first),
            *notes,
        ),
        values=(*o.sodium_values(), *values, *relower_values),
        inputs=o.inputs(),
        formulas=tuple(formula_lines),
        sources=unique([*o.sources(), o.th.cite("relowering_free_water_ml_per_kg")]),
        next_steps=(*relower_lines, "Recheck sodium within 1-2 h of the infusion."),
        cautions=(CAUTION,),
    )


def hypotonic_fluid_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    hypo = [f for f in fluids if f.tonicity is FluidTonicity.HYPOTONIC]
    if not hypo or not (o.hyponatremic or o.overcorrected):
        return None
    first = hypo[0]
    if o.overcorrected:
        return _relowering_finding(o, first, hypo)
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
            *o.potassium_line(first),
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


def _hypovolemia_clue(o: OrderContext) -> str | None:
    una = o.ctx.current.get(Analyte.URINE_SODIUM)
    if o.ctx.has_condition(ConditionCategory.VOMITING_DIARRHEA):
        return "vomiting or diarrhoea is coded"
    if una is not None and una.value <= o.th.urine_sodium_low_at_most:
        return f"urine sodium is {qty(una.value, Analyte.URINE_SODIUM, o.ctx.display_units)}"
    return None


def isotonic_fluid_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    iso = [f for f in fluids if f.tonicity is FluidTonicity.ISOTONIC and f.sodium > 0]
    if not iso or not (o.hyponatremic or o.overcorrected):
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
    cautions = [CAUTION]
    clue = _hypovolemia_clue(o)
    if clue is not None:
        cautions.append(
            f"Possible hypovolemia ({clue}): restoring volume can switch off vasopressin, and "
            "the water diuresis that follows can overcorrect sodium. Watch urine output and "
            "recheck sodium every few hours (Verbalis 2013; Spasovski 2014)."
        )
    effect = o.effect(first)
    per_l = f"; expected {signed(effect.delta_per_liter)} mmol/L per litre" if effect else ""
    details = [
        urine,
        f"{first.label} is a {first.kind} (Na {num(first.sodium)}, K {num(first.potassium)} "
        f"mmol/L; labelled osmolarity {osm} mOsm/L).",
        *o.potassium_line(first),
        *o.extra_lines(),
        *notes,
    ]
    urgency = Urgency.INFO
    if o.overcorrected:
        details.insert(0, _OVERCORRECTED)
        urgency = Urgency.WARNING
    return Finding(
        code=FindingCode.ISOTONIC_FLUID_ORDER,
        urgency=urgency,
        summary=shorten(
            f"{shorten(first.label, 40)}{f' ({first.kind})' if first.balanced else ''} "
            f"drafted while sodium is {_na(o)}{per_l}",
            139,
        ),
        details=tuple(details),
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
        cautions=tuple(cautions),
    )


def hypertonic_saline_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    hyper = [f for f in fluids if f.tonicity is FluidTonicity.HYPERTONIC]
    if not hyper:
        return None
    th, first = o.th, hyper[0]
    if o.overcorrected:
        return Finding(
            code=FindingCode.HYPERTONIC_SALINE_ORDER,
            urgency=Urgency.CRITICAL,
            summary=shorten(
                f"{shorten(first.label, 30)} drafted after sodium already rose above the "
                "correction limit: it works against re-lowering",
                139,
            ),
            details=(_OVERCORRECTED,),
            values=tuple(o.sodium_values()),
            inputs=o.inputs(),
            sources=(th.cite("relowering_free_water_ml_per_kg"),),
            next_steps=("Remove the draft and seek expert advice on re-lowering.",),
            cautions=(CAUTION,),
            remove_draft=first.draft.resource_id,
        )
    values, formula_lines, notes = o.arithmetic(first, goal=True)
    effect = o.effect(first, goal=True)
    lim = o.limits
    limit, goal = num(lim.next_24h), num(lim.goal_high)
    summary = f"{shorten(first.label, 30)} drafted (sodium {_na(o)})"
    details = list(
        hypertonic_indication(
            o.presentation or presentation(o.ctx, th), o.sodium.value if o.sodium else None, th
        )
    )
    details += list((o.presentation or presentation(o.ctx, th)).lines())
    details.append(
        f"Daily goal {num(lim.goal_low)}-{goal} mmol/L (Verbalis 2013); limit {limit} mmol/L "
        f"in the coming 24 h ({lim.basis}). The goal is the aim; the limit is never a target."
    )
    details += notes
    cautions = [
        CAUTION,
        "The formula ignores urine and other losses: the real rise can be "
        "larger, above all once a reversible cause of water retention is removed.",
    ]
    values += [
        value(V.CORRECTION_GOAL_24H, lim.goal_high),
        value(V.CORRECTION_LIMIT_24H, lim.next_24h),
    ]
    if effect is not None:
        summary += f": {signed(effect.delta_per_liter)} mmol/L per litre"
        if effect.volume_to_goal_24h is not None:
            values.append(value(V.VOLUME_TO_GOAL_24H, effect.volume_to_goal_24h, 2))
        if effect.max_volume_24h is not None:
            values.append(value(V.MAX_VOLUME_24H, effect.max_volume_24h, 2))
            if effect.headroom_24h == 0:
                summary += f"; the {limit} mmol/L 24-h limit is already used"
            elif effect.volume_to_goal_24h is not None:
                summary += (
                    f"; {num(effect.volume_to_goal_24h, 2)} L reaches the {goal} mmol/L goal "
                    f"(limit {limit})"
                )
        rise = effect.projected_rise_24h
        if rise is not None and rise > lim.next_24h:
            cautions.append(
                f"As drafted the projected 24-h rise is {signed(rise)} mmol/L, above "
                f"the {limit} mmol/L limit."
            )
    if lim.high_risk_reasons:
        details.append("High-risk limit applies: " + "; ".join(lim.high_risk_reasons) + ".")
    extra = o.extra_lines()
    details += extra
    return Finding(
        code=FindingCode.HYPERTONIC_SALINE_ORDER,
        urgency=Urgency.WARNING,
        summary=shorten(summary, 139),
        details=tuple(details),
        values=(*o.sodium_values(), *values),
        inputs=o.inputs(),
        formulas=tuple(formula_lines),
        sources=unique(
            [
                *o.sources(),
                th.cite("correction_goal_24h_high"),
                th.cite("correction_limit_24h"),
                th.cite("bolus_hypertonic_volume"),
            ]
        ),
        next_steps=(
            "Check sodium as the regimen says (20 min during boluses; then 6 and 12 h), "
            "per local protocol.",
        ),
        cautions=tuple(cautions),
    )


def potassium_finding(o: OrderContext, fluids: list[ResolvedFluid]) -> Finding | None:
    """POTASSIUM_ORDER: potassium drafted while Na < 135 (DESIGN.md): it raises sodium as
    sodium does (Adrogué 2000: the numerator is Na + K) and counts toward the correction."""
    if not o.hyponatremic:
        return None
    salts = potassium_salts()
    drugs = [
        d
        for d in o.ctx.draft_medications
        if d.selected and salts.matches(d.names, d.rxnorm, d.display)
    ]
    in_fluids = [f for f in fluids if f.added_potassium > 0]
    if not drugs and not in_fluids:
        return None
    first_label = drugs[0].display if drugs else in_fluids[0].label
    first_id = drugs[0].resource_id if drugs else in_fluids[0].draft.resource_id
    details = [
        "Potassium raises sodium as sodium does: in the Adrogué–Madias formula the infusate's "
        "Na + K is the numerator, and potassium that enters cells lets sodium leave them "
        "(Adrogué 2000). Count it toward the correction limit.",
        *(f"- {d.display} ({d.resource_id})" for d in drugs),
        *(
            f"- {f.label} ({f.draft.resource_id}): {num(f.added_potassium)} mmol/L potassium"
            for f in in_fluids
        ),
    ]
    for f in in_fluids[:1]:
        details += o.potassium_line(f)
    k = o.ctx.current.get(Analyte.POTASSIUM)
    if k is not None and k.value < o.th.hypokalemia_below:
        details.append(
            f"Potassium {qty(k.value, Analyte.POTASSIUM, o.ctx.display_units)}: repleting it is "
            "needed, and it also raises sodium; hypokalemia is itself a risk factor for "
            "osmotic demyelination (Verbalis 2013)."
        )
    urgency = Urgency.WARNING
    if o.overcorrected:
        details.insert(0, _OVERCORRECTED)
    values = [*o.sodium_values(), value(V.CORRECTION_LIMIT_24H, o.limits.next_24h)]
    return Finding(
        code=FindingCode.POTASSIUM_ORDER,
        urgency=urgency,
        summary=shorten(
            f"{shorten(first_label, 40)} drafted while sodium is {_na(o)}: potassium raises "
            "sodium and counts toward the correction limit",
            139,
        ),
        details=tuple(details),
        values=tuple(values),
        inputs=o.inputs() + ((used(k),) if k else ()),
        sources=unique([cite("adrogue2000", True), o.th.cite("correction_limit_24h")]),
        next_steps=(
            "Keep the potassium if it is needed; plan sodium checks and count its effect in "
            "the day's rise.",
        ),
        cautions=(CAUTION,),
        extra={"draft": first_id},
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
    if o.overcorrected:
        details.insert(0, _OVERCORRECTED)
    if o.limits.high_risk_reasons:
        details.append("High-risk limit applies: " + "; ".join(o.limits.high_risk_reasons) + ".")
    values = [*o.sodium_values(), value(V.CORRECTION_LIMIT_24H, o.limits.next_24h)]
    summary = (
        f"{first.name.capitalize()} drafted after sodium already rose above the limit: it "
        "works against re-lowering"
        if o.overcorrected
        else f"{first.name.capitalize()} drafted (sodium {_na(o)}): risk of "
        "overcorrection; frequent sodium checks, no fluid restriction at first"
    )
    return Finding(
        code=FindingCode.VAPTAN_ORDER,
        urgency=Urgency.CRITICAL if o.overcorrected else Urgency.WARNING,
        summary=shorten(summary, 139),
        details=tuple(details),
        values=tuple(values),
        inputs=o.sodium_input(),
        sources=unique(
            [first.drug_class.citation, o.th.cite("correction_limit_24h"), cite("samsca_label")]
        ),
        next_steps=(
            ("Remove the draft and seek expert advice on re-lowering.",)
            if o.overcorrected
            else ("Plan sodium checks and a limit before the first dose.",)
        ),
        cautions=tuple(cautions),
        remove_draft=first.source_id if o.overcorrected else None,
    )


def order_findings(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Findings about the selected draft orders."""
    status = surveil(ctx, th)
    o = OrderContext(
        ctx,
        th,
        ctx.current.get(Analyte.SODIUM),
        body_water(ctx, th),
        applicable_limits(ctx, th),
        risen_last_24h(ctx),
        overcorrected=status is not None and status.exceeded,
        presentation=presentation(ctx, th),
    )
    fluids = _selected_fluids(ctx, th)
    found = [
        hypotonic_fluid_finding(o, fluids),
        isotonic_fluid_finding(o, fluids),
        hypertonic_saline_finding(o, fluids),
        potassium_finding(o, fluids),
        drug_order_finding(o),
        vaptan_finding(o),
    ]
    return [f for f in found if f is not None]
