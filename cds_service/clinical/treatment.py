"""Treatment arithmetic for a drafted fluid: body water, Adrogué–Madias change per litre,
the volume that reaches the 24-h limit, and the rise projected from the drafted volume/rate.

When sex or age is unknown every candidate body-water fraction is computed and the smallest
body water is used for the numbers (it predicts the largest change, the safer assumption).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from enum import StrEnum

from cds_service.clinical import formulas
from cds_service.clinical.context import (
    Analyte,
    ClinicalContext,
    ConditionCategory,
    LabResult,
    Sex,
)
from cds_service.clinical.episode import current_episode
from cds_service.clinical.infusates import ResolvedFluid
from cds_service.clinical.notes import num, signed
from cds_service.clinical.thresholds import Thresholds


@dataclass(frozen=True, slots=True)
class BodyWater:
    weight: LabResult
    candidates: tuple[tuple[str, float, float], ...]  # (who, fraction, litres)

    def __post_init__(self) -> None:
        if not self.candidates:
            raise ValueError("body water needs at least one candidate fraction")

    @property
    def litres(self) -> float:
        """The smallest candidate: the one that predicts the largest change in sodium."""
        return min(c[2] for c in self.candidates)

    @property
    def uncertain(self) -> bool:
        return len(self.candidates) > 1

    def lines(self) -> tuple[str, ...]:
        kg = num(self.weight.value)
        return tuple(
            f"Total body water ({who}) = {num(frac, 2)} × {kg} kg = {num(litres)} L"
            for who, frac, litres in self.candidates
        )

    def notes(self) -> tuple[str, ...]:
        if not self.uncertain:
            return ()
        return (
            f"Sex or age not recorded: body water computed for each; the figures use the "
            f"smallest, {num(self.litres)} L (it predicts the largest change).",
        )


def body_water(ctx: ClinicalContext, th: Thresholds) -> BodyWater | None:
    """Body-water candidates from weight, sex and age (Adrogué & Madias 2000); None without
    a recorded weight."""
    weight = ctx.current.get(Analyte.BODY_WEIGHT)
    if weight is None or weight.value <= 0:
        return None
    sexes = [ctx.patient.sex] if ctx.patient.sex is not Sex.UNKNOWN else [Sex.MALE, Sex.FEMALE]
    age = ctx.patient.age_years
    ages = [age] if age is not None else [th.adult_age_years, th.elderly_age_years]
    candidates = []
    for sex in sexes:
        for a in ages:
            frac = formulas.tbw_fraction(a, sex is Sex.FEMALE, th)
            elderly = "elderly " if a >= th.elderly_age_years else ""
            who = f"{elderly}{'woman' if sex is Sex.FEMALE else 'man'}"
            candidates.append((who, frac, formulas.total_body_water(weight.value, frac)))
    return BodyWater(weight, tuple(dict.fromkeys(candidates)))


@dataclass(frozen=True, slots=True)
class InfusionEffect:
    fluid: ResolvedFluid
    serum_sodium: float
    tbw: float
    delta_per_liter: float
    max_volume_24h: float | None  # litres to reach the 24-h limit; None if it does not raise Na
    volume_24h: float | None  # litres drafted to run within 24 h, when stated
    limit_24h: float
    risen_24h: float = 0.0  # rise already made in the 24 h up to the latest sodium
    goal_24h: float | None = None  # the US panel's daily goal (top of its range), if shown
    volume_to_goal_24h: float | None = None  # litres that reach the goal, never the limit

    @property
    def headroom_24h(self) -> float:
        """What is left of the 24-h limit after the rise already made (never negative)."""
        return max(0.0, self.limit_24h - self.risen_24h)

    @property
    def projected_rise_24h(self) -> float | None:
        if self.volume_24h is None:
            return None
        return self.delta_per_liter * self.volume_24h

    def lines(self) -> tuple[str, ...]:
        f = self.fluid
        out = [
            f"Change per litre (Adrogué–Madias) = ({num(f.sodium)} + {num(f.potassium)} − "
            f"{num(self.serum_sodium)}) / ({num(self.tbw)} + 1) = "
            f"{signed(self.delta_per_liter)} mmol/L"
        ]
        if self.max_volume_24h is not None and self.headroom_24h == 0:
            out.append(
                f"24-h limit already used: sodium has risen {num(self.risen_24h)} mmol/L "
                f"in 24 h against a limit of {num(self.limit_24h)}; any further rise "
                "exceeds it"
            )
        elif self.max_volume_24h is not None:
            if self.risen_24h > 0:
                out.append(
                    f"Left of the {num(self.limit_24h)} mmol/L 24-h limit = "
                    f"{num(self.limit_24h)} − {num(self.risen_24h)} already risen = "
                    f"{num(self.headroom_24h)} mmol/L"
                )
            out.append(
                f"Volume to the {num(self.limit_24h)} mmol/L 24-h limit = "
                f"{num(self.headroom_24h)} / {num(self.delta_per_liter)} = "
                f"{num(self.max_volume_24h, 2)} L"
            )
        if self.volume_to_goal_24h is not None and self.goal_24h is not None:
            left = max(0.0, self.goal_24h - self.risen_24h)
            out.append(
                f"Volume to the {num(self.goal_24h)} mmol/L daily goal = {num(left)} / "
                f"{num(self.delta_per_liter)} = {num(self.volume_to_goal_24h, 2)} L"
            )
        rise = self.projected_rise_24h
        if rise is not None and self.volume_24h is not None:
            out.append(
                f"Projected 24-h change = {signed(self.delta_per_liter)} × "
                f"{num(self.volume_24h, 2)} L = {signed(rise)} mmol/L"
            )
        return tuple(out)


def drafted_volume_24h(fluid: ResolvedFluid) -> float | None:
    """Litres the draft would run within 24 h: the rate over 24 h, capped by the volume."""
    d = fluid.draft
    by_rate = None if d.rate_ml_per_h is None else d.rate_ml_per_h * 24 / 1000
    if by_rate is not None and d.volume_l is not None:
        return min(by_rate, d.volume_l)
    return by_rate if by_rate is not None else d.volume_l


def infusion_effect(
    fluid: ResolvedFluid,
    serum_sodium: float,
    tbw: float,
    limit_24h: float,
    risen_24h: float = 0.0,
    goal_24h: float | None = None,
) -> InfusionEffect:
    """Adrogué–Madias change per litre, the volume that uses up what is left of the 24-h
    limit once the rise already made in the last 24 h (``risen_24h``) is counted, and (with
    ``goal_24h``) the volume that reaches the daily goal instead."""
    delta = formulas.delta_sodium_per_liter(fluid.sodium, fluid.potassium, serum_sodium, tbw)
    risen = max(0.0, risen_24h)
    headroom = max(0.0, limit_24h - risen)
    to_goal = None
    if goal_24h is not None:
        to_goal = formulas.volume_to_limit(max(0.0, min(goal_24h, limit_24h) - risen), delta)
    return InfusionEffect(
        fluid=fluid,
        serum_sodium=serum_sodium,
        tbw=tbw,
        delta_per_liter=delta,
        max_volume_24h=formulas.volume_to_limit(headroom, delta),
        volume_24h=drafted_volume_24h(fluid),
        limit_24h=limit_24h,
        risen_24h=risen,
        goal_24h=goal_24h,
        volume_to_goal_24h=to_goal,
    )


# ---- symptoms and acuity: what the 2014 European guideline ties hypertonic saline to --------


class SymptomClass(StrEnum):
    SEVERE = "severe"
    MODERATELY_SEVERE = "moderately severe"


#: Coded problems read as symptoms (Spasovski 2014, section 5.2 symptom classes).
_SYMPTOMS: dict[ConditionCategory, tuple[str, SymptomClass]] = {
    ConditionCategory.SYMPTOM_SEIZURE: ("seizures", SymptomClass.SEVERE),
    ConditionCategory.SYMPTOM_COMA: ("coma", SymptomClass.SEVERE),
    ConditionCategory.SYMPTOM_SOMNOLENCE: ("deep somnolence", SymptomClass.SEVERE),
    ConditionCategory.SYMPTOM_CARDIORESPIRATORY_DISTRESS: (
        "cardiorespiratory distress",
        SymptomClass.SEVERE,
    ),
    ConditionCategory.SYMPTOM_CONFUSION: ("confusion", SymptomClass.MODERATELY_SEVERE),
    ConditionCategory.SYMPTOM_HEADACHE: ("headache", SymptomClass.MODERATELY_SEVERE),
}


@dataclass(frozen=True, slots=True)
class Presentation:
    """Symptoms as coded, and whether the fall is documented as acute."""

    symptoms: SymptomClass | None
    named: tuple[str, ...]  # the coded symptoms, as words
    vomiting_or_diarrhoea: bool  # coded together: vomiting is severe, diarrhoea is not
    acute: bool  # a normal sodium within 48 h before the first low one
    acute_fall: float | None  # mmol/L from that normal sodium to the episode's lowest

    def lines(self) -> tuple[str, ...]:
        out = []
        if self.symptoms is None:
            out.append(
                "No severe or moderately severe symptom is coded: symptoms are to be "
                "assessed at the bedside."
            )
        else:
            out.append(f"Coded {self.symptoms.value} symptoms: {', '.join(self.named)}.")
        if self.vomiting_or_diarrhoea:
            out.append(
                "Vomiting or diarrhoea is coded: vomiting counts as a severe symptom "
                "(Spasovski 2014); check which at the bedside."
            )
        if self.acute and self.acute_fall is not None:
            out.append(
                f"Acute: sodium fell {num(self.acute_fall)} mmol/L within 48 h of a normal value."
            )
        else:
            out.append(
                "Chronic or of unknown duration (no normal sodium within 48 h before the "
                "episode): the guideline treats it as chronic."
            )
        return tuple(out)


def presentation(ctx: ClinicalContext, th: Thresholds) -> Presentation:
    coded = [(word, cls) for cat, (word, cls) in _SYMPTOMS.items() if ctx.has_condition(cat)]
    severe = [w for w, c in coded if c is SymptomClass.SEVERE]
    symptoms = SymptomClass.SEVERE if severe else SymptomClass.MODERATELY_SEVERE if coded else None
    episode = current_episode(ctx.series.get(Analyte.SODIUM, ()), th.sodium_lower_normal)
    acute, fall = False, None
    if episode is not None and episode.last_normal_before is not None:
        normal = episode.last_normal_before
        acute = episode.first_low.time - normal.time <= timedelta(hours=th.acute_onset_hours)
        fall = normal.value - episode.nadir.value
    return Presentation(
        symptoms,
        tuple(w for w, _ in coded),
        ctx.has_condition(ConditionCategory.VOMITING_DIARRHEA),
        acute,
        fall if acute else None,
    )


def hypertonic_indication(p: Presentation, sodium: float | None, th: Thresholds) -> list[str]:
    """What the 2014 European guideline (section 8) says about hypertonic saline for this
    presentation: the regimen when it applies, and that it does not apply otherwise."""
    vol, mins = num(th.bolus_hypertonic_volume, 0), num(th.bolus_hypertonic_minutes, 0)
    limits = (
        f"then at most {num(th.correction_limit_first_24h_europe)} mmol/L in the first 24 h and "
        f"{num(th.correction_limit_next_24h_europe)} in every 24 h after, until sodium reaches "
        f"{num(th.hypertonic_stop_sodium, 0)} mmol/L"
    )
    if p.symptoms is SymptomClass.SEVERE:
        out = [
            f"Severe symptoms (Spasovski 2014, section 8.1.1): {vol} mL of 3% saline over "
            f"{mins} min; check sodium after {num(th.bolus_recheck_minutes, 0)} min while a "
            f"second {vol} mL runs; repeat up to {num(th.bolus_repeats, 0)} more times (at "
            f"most {num(th.bolus_repeats + 1, 0)} infusions) or until sodium has risen "
            f"{num(th.bolus_target_rise, 0)} mmol/L; {limits} (section 8.1.2)."
        ]
        if sodium is not None and sodium >= th.severity_mild_lower:
            out.append(
                f"Sodium {num(sodium)} mmol/L is only mildly low for severe symptoms: seek "
                "another cause of the symptoms (Spasovski 2014, section 8.1)."
            )
        return out
    if p.symptoms is SymptomClass.MODERATELY_SEVERE:
        return [
            f"Moderately severe symptoms (Spasovski 2014, section 8.2): a single {vol} mL of 3% "
            f"saline over {mins} min, aiming at a rise of "
            f"{num(th.moderate_symptoms_aim_rise_24h, 0)} mmol/L per 24 h; {limits}."
        ]
    if p.acute and p.acute_fall is not None and p.acute_fall > th.acute_fall_hypertonic_above:
        return [
            f"Acute fall of {num(p.acute_fall)} mmol/L (more than "
            f"{num(th.acute_fall_hypertonic_above, 0)}) without coded severe symptoms "
            f"(Spasovski 2014, section 8.3): a single {vol} mL of 3% saline over {mins} min; "
            "check sodium after 4 h."
        ]
    return [
        "The 2014 European guideline ties hypertonic saline to severe or moderately severe "
        f"symptoms, or an acute fall of more than {num(th.acute_fall_hypertonic_above, 0)} "
        "mmol/L; none is documented here. Without them it does not advise hypertonic saline: "
        "assess symptoms at the bedside first (Spasovski 2014, section 8)."
    ]


def low_solute_line(ctx: ClinicalContext, th: Thresholds) -> str | None:
    """Alcohol use disorder or malnutrition: low solute intake caps water excretion at
    solute load / minimal urine osmolality (Berl 2008); solute given lets it rise fast."""
    coded = [
        word
        for cat, word in (
            (ConditionCategory.ALCOHOL_USE_DISORDER, "alcohol use disorder"),
            (ConditionCategory.MALNUTRITION, "malnutrition"),
        )
        if ctx.has_condition(cat)
    ]
    if not coded:
        return None
    low = formulas.max_urine_volume(th.solute_load_low, th.urine_osmolality_minimal)
    usual = formulas.max_urine_volume(th.solute_load_typical, th.urine_osmolality_minimal)
    return (
        f"{' and '.join(coded).capitalize()} coded: with low solute intake the kidneys can "
        f"excrete at most about {num(th.solute_load_low, 0)} / "
        f"{num(th.urine_osmolality_minimal, 0)} = {num(low)} L of urine a day (against "
        f"{num(usual)} L on a usual diet); solute given (saline, feeding) raises that limit "
        "and sodium can then rise quickly."
    )


UNCHECKED_PATIENT = (
    "Age and sex could not be checked (no Patient record was read): body water and the "
    "change per litre depend on them and are not computed."
)
