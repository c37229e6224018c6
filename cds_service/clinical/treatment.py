"""Treatment arithmetic for a drafted fluid: body water, Adrogué–Madias change per litre,
the volume that reaches the 24-h limit, and the rise projected from the drafted volume/rate.

When sex or age is unknown every candidate body-water fraction is computed and the smallest
body water is used for the numbers (it predicts the largest change, the safer assumption).
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical import formulas
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult, Sex
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
) -> InfusionEffect:
    """Adrogué–Madias change per litre, and the volume that uses up what is left of the 24-h
    limit once the rise already made in the last 24 h (``risen_24h``) is counted."""
    delta = formulas.delta_sodium_per_liter(fluid.sodium, fluid.potassium, serum_sodium, tbw)
    headroom = max(0.0, limit_24h - max(0.0, risen_24h))
    return InfusionEffect(
        fluid=fluid,
        serum_sodium=serum_sodium,
        tbw=tbw,
        delta_per_liter=delta,
        max_volume_24h=formulas.volume_to_limit(headroom, delta),
        volume_24h=drafted_volume_24h(fluid),
        limit_24h=limit_24h,
        risen_24h=max(0.0, risen_24h),
    )
