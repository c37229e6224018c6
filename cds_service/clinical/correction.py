"""Correction-rate surveillance: how fast serial sodium rose, against the applicable limit.

Limits (2013 US expert panel, Verbalis 2013; 2014 European guideline, Spasovski 2014): at most
10 mmol/L in any 24 h and 18 in any 48 h; at most 8 in any 24 h when osmotic demyelination
risk is present (sodium <= 105, hypokalemia, alcohol use disorder, malnutrition, advanced
liver disease). The window maxima do not depend on the order the results arrive in.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta

from cds_service.clinical._data import cite
from cds_service.clinical.context import Analyte, ClinicalContext, ConditionCategory, LabResult
from cds_service.clinical.episode import Episode, chronological, current_episode
from cds_service.clinical.findings import Finding, FindingCode, Urgency, Value, ValueName
from cds_service.clinical.notes import CAUTION, num, signed, used
from cds_service.clinical.thresholds import Thresholds, load_thresholds

_RISK_CONDITIONS: dict[ConditionCategory, str] = {
    ConditionCategory.ALCOHOL_USE_DISORDER: "alcohol use disorder",
    ConditionCategory.MALNUTRITION: "malnutrition",
    ConditionCategory.CIRRHOSIS: "advanced liver disease",
}


@dataclass(frozen=True, slots=True)
class CorrectionLimits:
    limit_24h: float
    limit_48h: float
    high_risk_reasons: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not 0 < self.limit_24h <= self.limit_48h:
            raise ValueError("correction limits need 0 < limit_24h <= limit_48h")


@dataclass(frozen=True, slots=True)
class Rise:
    """The largest rise within a window: from ``start`` to ``end``."""

    amount: float
    start: LabResult
    end: LabResult


@dataclass(frozen=True, slots=True)
class CorrectionStatus:
    limits: CorrectionLimits
    rise_24h: Rise | None
    rise_48h: Rise | None
    latest: LabResult

    @property
    def exceeded_24h(self) -> bool:
        return self.rise_24h is not None and self.rise_24h.amount > self.limits.limit_24h

    @property
    def exceeded_48h(self) -> bool:
        return self.rise_48h is not None and self.rise_48h.amount > self.limits.limit_48h

    @property
    def exceeded(self) -> bool:
        return self.exceeded_24h or self.exceeded_48h


def max_rise(
    results: Iterable[LabResult], hours: float, ending_after: datetime | None = None
) -> Rise | None:
    """Largest ``later - earlier`` over pairs at most ``hours`` apart (strictly later times),
    counting only pairs whose later result is at or after ``ending_after`` when given.

    None when no two results at different times fall within the window. Ties go to the
    earliest later result, then to the latest earlier one. One pass: for each later result
    the lowest earlier result in its window is kept at the front of a deque (a sliding-window
    minimum), so a long series costs O(n), not O(n x results per window).
    """
    ordered = chronological(results)
    window = timedelta(hours=hours)
    best: Rise | None = None
    lows: deque[int] = deque()  # indexes of candidate starts, values increasing from the front
    oldest = 0  # first index inside the window of the current end
    earlier = 0  # first index at the current end's time: starts are the indexes before it
    for end in ordered:
        while ordered[earlier].time < end.time:  # admit every start strictly before ``end``
            value = ordered[earlier].value
            while lows and ordered[lows[-1]].value >= value:  # keep the latest of equal lows
                lows.pop()
            lows.append(earlier)
            earlier += 1
        while end.time - ordered[oldest].time > window:
            oldest += 1
        while lows and lows[0] < oldest:
            lows.popleft()
        if not lows or (ending_after is not None and end.time < ending_after):
            continue
        start = ordered[lows[0]]
        amount = end.value - start.value
        if best is None or amount > best.amount:
            best = Rise(amount, start, end)
    return best


def _episode(ctx: ClinicalContext, th: Thresholds) -> Episode | None:
    return current_episode(ctx.series.get(Analyte.SODIUM, ()), th.sodium_lower_normal)


def episode_start(ctx: ClinicalContext, th: Thresholds | None = None) -> datetime | None:
    """Time of the lowest sodium of the current hyponatremic episode (the surveillance baseline)."""
    episode = _episode(ctx, th or load_thresholds())
    return None if episode is None else episode.nadir.time


def applicable_limits(ctx: ClinicalContext, th: Thresholds) -> CorrectionLimits:
    """The 24-h and 48-h limits for this patient, and the reasons when high-risk limits apply."""
    reasons: list[str] = []
    episode = _episode(ctx, th)
    lows = [r.value for r in episode.run] if episode else []
    current = ctx.current.get(Analyte.SODIUM)
    if current is not None:
        lows.append(current.value)
    if lows and min(lows) <= th.high_risk_sodium_at_most:
        reasons.append(f"sodium {min(lows):g} mmol/L (<= {th.high_risk_sodium_at_most:g})")
    since = episode.first_low.time if episode else None
    potassium = [
        k for k in ctx.series.get(Analyte.POTASSIUM, ()) if since is None or k.time >= since
    ]
    if Analyte.POTASSIUM in ctx.current:
        potassium.append(ctx.current[Analyte.POTASSIUM])
    if potassium and min(k.value for k in potassium) < th.hypokalemia_below:
        low_k = min(k.value for k in potassium)
        reasons.append(f"hypokalemia (potassium {low_k:g} mmol/L)")
    reasons.extend(label for cat, label in _RISK_CONDITIONS.items() if ctx.has_condition(cat))
    if reasons:
        return CorrectionLimits(
            th.correction_limit_24h_high_risk, th.correction_limit_48h_high_risk, tuple(reasons)
        )
    return CorrectionLimits(th.correction_limit_24h, th.correction_limit_48h)


def risen_last_24h(ctx: ClinicalContext) -> float:
    """How far sodium has already risen in the 24 h up to the current result: the current
    value minus the lowest result of those 24 h (0 when it has not risen). Orders spend only
    what is left of the 24-h limit."""
    current = ctx.current.get(Analyte.SODIUM)
    if current is None:
        return 0.0
    since = current.time - timedelta(hours=24)
    series = ctx.series.get(Analyte.SODIUM, ())
    window = [r.value for r in series if since <= r.time <= current.time]
    return max(0.0, current.value - min([*window, current.value]))


def surveil(ctx: ClinicalContext, th: Thresholds) -> CorrectionStatus | None:
    """Window maxima over the current episode and what followed it, for rises that ended
    within the look-back (an old overcorrection is history); None without an episode."""
    episode = _episode(ctx, th)
    if episode is None:
        return None
    results = episode.surveillance
    recent = ctx.now - timedelta(hours=th.correction_lookback_hours)
    return CorrectionStatus(
        limits=applicable_limits(ctx, th),
        rise_24h=max_rise(results, 24, recent),
        rise_48h=max_rise(results, 48, recent),
        latest=results[-1],
    )


def correction_finding(ctx: ClinicalContext, th: Thresholds) -> Finding | None:
    """CORRECTION_RATE when the largest 24-h or 48-h rise exceeds the applicable limit."""
    status = surveil(ctx, th)
    if status is None or not status.exceeded:
        return None
    limits = status.limits
    if status.rise_24h is not None and status.exceeded_24h:
        worst, hours, limit = status.rise_24h, 24, limits.limit_24h
    elif status.rise_48h is not None:
        worst, hours, limit = status.rise_48h, 48, limits.limit_48h
    else:  # pragma: no cover - exceeded implies one of the rises exists
        return None
    values = [Value(ValueName.SERUM_SODIUM, round(status.latest.value, 1))]
    details = []
    for name, rise, h, lim in (
        (ValueName.SODIUM_CHANGE_24H, status.rise_24h, 24, limits.limit_24h),
        (ValueName.SODIUM_CHANGE_48H, status.rise_48h, 48, limits.limit_48h),
    ):
        if rise is not None:
            values.append(Value(name, round(rise.amount, 1)))
            details.append(
                f"Largest rise within {h} h: {signed(rise.amount)} mmol/L ({num(rise.start.value)}"
                f" at {rise.start.time:%Y-%m-%d %H:%M} to {num(rise.end.value)} at "
                f"{rise.end.time:%Y-%m-%d %H:%M} UTC); limit {num(lim)} mmol/L."
            )
    values.append(Value(ValueName.CORRECTION_LIMIT_24H, round(limits.limit_24h, 1)))
    if limits.high_risk_reasons:
        details.append(
            "High risk of osmotic demyelination: "
            + "; ".join(limits.high_risk_reasons)
            + f", so the limit is {num(limits.limit_24h)} mmol/L per 24 h."
        )
    rises = [r for r in (status.rise_24h, status.rise_48h) if r is not None]
    points = [p for rise in rises for p in (rise.start, rise.end)]
    return Finding(
        code=FindingCode.CORRECTION_RATE,
        urgency=Urgency.CRITICAL,
        summary=(
            f"Sodium rose {num(worst.amount)} mmol/L within {hours} h "
            f"({num(worst.start.value)} to {num(worst.end.value)}), above the "
            f"{num(limit)} mmol/L limit"
        ),
        details=tuple(details),
        values=tuple(values),
        inputs=tuple(used(r) for r in dict.fromkeys(points)),
        formulas=(
            f"Rise = {num(worst.end.value)} − {num(worst.start.value)} = "
            f"{num(worst.amount)} mmol/L within {hours} h",
        ),
        sources=(
            th.cite("correction_limit_24h"),
            cite("spasovski2014", True),
            cite("verbalis2013", True),
        ),
        next_steps=(
            "Stop sodium-raising treatment (hypertonic saline, vaptans) and seek expert advice.",
            "Consider re-lowering sodium with electrolyte-free water (e.g. 5% dextrose) with or "
            "without desmopressin, per local protocol (Spasovski 2014; Verbalis 2013).",
        ),
        cautions=(CAUTION, "Osmotic demyelination can show days later: watch neurology."),
    )
