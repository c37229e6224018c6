"""Correction-rate surveillance: how fast serial sodium rose, against the applicable limits.

Two sets of limits, both checked by default (the stricter wins; an institution may select one
with ``[clinical] correction_guideline = "europe" | "us"``):

- 2014 European guideline (Spasovski 2014, sections 8.1.2 and 8.5): counted from the start
  of the episode (its lowest sodium), a rise of at most 10 mmol/L in the first 24 h and at
  most 8 mmol/L in every 24 h after that (a running total of 10, 18, 26 ... by the end of
  day 1, 2, 3 ..., and 8 in any 24 h that lies wholly after the first day).
- 2013 US expert panel (Verbalis 2013): at most 10 (the stricter end of 10-12) in any 24 h
  and 18 in any 48 h; 8 in any 24 h at high risk of osmotic demyelination (sodium <= 105,
  hypokalemia, alcoholism, malnutrition, advanced liver disease). Its goals, 4-8 mmol/L per
  day (4-6 at high risk), are shown beside the limits and are never the limits themselves.

A rise between two results taken close together, or by different methods (whole blood direct
ISE against laboratory serum/plasma), is reported with a caveat and a confirming laboratory
sodium. The window maxima do not depend on the order the results arrive in.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta

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
    """The limits that apply, and the US panel's daily goal beside them.

    ``limit_24h``/``limit_48h`` count from the episode's lowest sodium (the trend chart's
    band): the stricter of the selected guidelines for the first 24 h and by 48 h.
    ``next_24h`` is what the coming 24 h may add (the European limit drops to 8 after the
    episode's first day); orders spend it. ``goal_low``/``goal_high`` are the US panel's goal
    range (4-8, 4-6 at high risk), capped at ``next_24h``.
    """

    limit_24h: float
    limit_48h: float
    high_risk_reasons: tuple[str, ...] = ()
    goal_low: float = 0.0
    goal_high: float = 0.0
    basis: str = ""  # which guideline and window ``next_24h`` comes from
    next_24h: float = 0.0  # 0: the same as limit_24h

    def __post_init__(self) -> None:
        if not 0 < self.limit_24h <= self.limit_48h:
            raise ValueError("correction limits need 0 < limit_24h <= limit_48h")
        if not self.next_24h:
            object.__setattr__(self, "next_24h", self.limit_24h)
        if not 0 <= self.goal_low <= self.goal_high <= self.next_24h:
            raise ValueError("correction goals need 0 <= goal_low <= goal_high <= next_24h")


@dataclass(frozen=True, slots=True)
class Rise:
    """The largest rise within a window: from ``start`` to ``end``."""

    amount: float
    start: LabResult
    end: LabResult


@dataclass(frozen=True, slots=True)
class LimitCheck:
    """One guideline limit over one kind of window, and the largest rise found in it."""

    guideline: str  # "europe" | "us"
    window: str  # how the window reads on a card: "within the first 24 h of the episode"
    hours: float  # window length
    limit: float
    rise: Rise | None
    key: str  # the thresholds.toml key the limit comes from (for its citation)

    @property
    def exceeded(self) -> bool:
        return self.rise is not None and self.rise.amount > self.limit

    @property
    def excess(self) -> float:
        return -math.inf if self.rise is None else self.rise.amount - self.limit


@dataclass(frozen=True, slots=True)
class CorrectionStatus:
    limits: CorrectionLimits
    rise_24h: Rise | None
    rise_48h: Rise | None
    latest: LabResult
    checks: tuple[LimitCheck, ...] = ()

    def _over(self, guideline: str, hours: float) -> bool:
        return any(c.exceeded for c in self.checks if (c.guideline, c.hours) == (guideline, hours))

    @property
    def exceeded_24h(self) -> bool:
        """The US panel's any-24-h limit is exceeded."""
        return self._over("us", 24)

    @property
    def exceeded_48h(self) -> bool:
        """The US panel's any-48-h limit is exceeded."""
        return self._over("us", 48)

    @property
    def exceeded(self) -> bool:
        return any(c.exceeded for c in self.checks)

    @property
    def worst(self) -> LimitCheck | None:
        """The exceeded check with the largest excess (None when nothing is exceeded)."""
        over = [c for c in self.checks if c.exceeded]
        return max(over, key=lambda c: c.excess) if over else None


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


def high_risk_reasons(ctx: ClinicalContext, th: Thresholds) -> tuple[str, ...]:
    """The US panel's osmotic demyelination risk factors found in the record (Verbalis 2013)."""
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
    return tuple(reasons)


def _uses(th: Thresholds, guideline: str) -> bool:
    return th.correction_guideline in ("stricter", guideline)


def _europe_limit_now(ctx: ClinicalContext, th: Thresholds, episode: Episode | None) -> float:
    """The European limit for the 24 h that follow now: 10 in the episode's first day, 8 after."""
    if episode is None or ctx.now - episode.nadir.time < timedelta(hours=24):
        return th.correction_limit_first_24h_europe
    return th.correction_limit_next_24h_europe


def applicable_limits(ctx: ClinicalContext, th: Thresholds) -> CorrectionLimits:
    """The limits of the selected guidelines (the stricter wins), the reasons when the US
    high-risk limits apply, and the US panel's goal capped at what the coming 24 h may add."""
    reasons = high_risk_reasons(ctx, th)
    first: list[float] = []  # limits for the episode's first 24 h
    by_48h: list[float] = []
    coming: list[tuple[float, str]] = []  # limits for the 24 h from now, with their basis
    if _uses(th, "us"):
        us_24 = th.correction_limit_24h_high_risk if reasons else th.correction_limit_24h
        first.append(us_24)
        by_48h.append(th.correction_limit_48h_high_risk if reasons else th.correction_limit_48h)
        risk = ", high risk of osmotic demyelination" if reasons else ""
        coming.append((us_24, f"US panel{risk} (Verbalis 2013)"))
    if _uses(th, "europe"):
        eu_first, eu_next = (
            th.correction_limit_first_24h_europe,
            th.correction_limit_next_24h_europe,
        )
        first.append(eu_first)
        by_48h.append(eu_first + eu_next)
        now_limit = _europe_limit_now(ctx, th, _episode(ctx, th))
        day = "first 24 h" if now_limit == eu_first else "each later 24 h"
        coming.append((now_limit, f"European guideline, {day} of the episode (Spasovski 2014)"))
    next_24h, basis = min(coming, key=lambda c: c[0])
    goal_top = th.correction_goal_24h_high_risk if reasons else th.correction_goal_24h_high
    goal_high = min(goal_top, next_24h)
    limit_24h = min(first)
    return CorrectionLimits(
        limit_24h,
        max(min(by_48h), limit_24h),
        reasons,
        goal_low=min(th.correction_goal_24h_low, goal_high),
        goal_high=goal_high,
        basis=basis,
        next_24h=next_24h,
    )


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


def _europe_checks(episode: Episode, th: Thresholds, recent: datetime) -> list[LimitCheck]:
    """Spasovski 2014: from the episode's lowest sodium, at most 10 by the end of the first 24 h
    and 8 more in every 24 h after (running total 10 + 8 per later day begun), and at most 8
    in any 24 h lying wholly after the first day."""
    base = episode.nadir
    first, later = th.correction_limit_first_24h_europe, th.correction_limit_next_24h_europe
    after = [r for r in episode.surveillance if r.time > base.time and r.time >= recent]
    day1 = [r for r in after if r.time - base.time <= timedelta(hours=24)]
    checks = []
    top = max(day1, key=lambda r: (r.value, -r.time.timestamp()), default=None)
    checks.append(
        LimitCheck(
            "europe",
            "within the first 24 h of the episode",
            24,
            first,
            None if top is None else Rise(top.value - base.value, base, top),
            "correction_limit_first_24h_europe",
        )
    )
    worst: tuple[float, float, LabResult] | None = None  # (excess, allowed, result)
    for r in after:
        hours = (r.time - base.time).total_seconds() / 3600
        if hours <= 24:
            continue
        allowed = first + later * math.ceil((hours - 24) / 24)
        excess = r.value - base.value - allowed
        if worst is None or excess > worst[0]:
            worst = (excess, allowed, r)
    if worst is not None:
        _, allowed, r = worst
        hours = (r.time - base.time).total_seconds() / 3600
        checks.append(
            LimitCheck(
                "europe",
                f"in the {num(hours, 0)} h since the episode's lowest sodium",
                hours,
                allowed,
                Rise(r.value - base.value, base, r),
                "correction_limit_next_24h_europe",
            )
        )
    later_results = [r for r in episode.surveillance if r.time - base.time >= timedelta(hours=24)]
    checks.append(
        LimitCheck(
            "europe",
            "within 24 h after the episode's first day",
            24,
            later,
            max_rise(later_results, 24, recent),
            "correction_limit_next_24h_europe",
        )
    )
    return checks


def _us_checks(
    limits: CorrectionLimits, th: Thresholds, rise_24h: Rise | None, rise_48h: Rise | None
) -> list[LimitCheck]:
    suffix = "_high_risk" if limits.high_risk_reasons else ""
    return [
        LimitCheck("us", f"within {hours} h", hours, getattr(th, key + suffix), rise, key + suffix)
        for hours, key, rise in (
            (24, "correction_limit_24h", rise_24h),
            (48, "correction_limit_48h", rise_48h),
        )
    ]


def surveil(ctx: ClinicalContext, th: Thresholds) -> CorrectionStatus | None:
    """Window maxima over the current episode and what followed it, for rises that ended
    within the look-back (an old overcorrection is history); None without an episode."""
    episode = _episode(ctx, th)
    if episode is None:
        return None
    results = episode.surveillance
    recent = ctx.now - timedelta(hours=th.correction_lookback_hours)
    limits = applicable_limits(ctx, th)
    rise_24h = max_rise(results, 24, recent)
    rise_48h = max_rise(results, 48, recent)
    checks: list[LimitCheck] = []
    if _uses(th, "us"):
        checks += _us_checks(limits, th, rise_24h, rise_48h)
    if _uses(th, "europe"):
        checks += _europe_checks(episode, th, recent)
    return CorrectionStatus(
        limits=limits,
        rise_24h=rise_24h,
        rise_48h=rise_48h,
        latest=results[-1],
        checks=tuple(checks),
    )


_GUIDELINE_NAME = {"europe": "European guideline", "us": "US panel"}


def rise_doubts(rise: Rise, th: Thresholds) -> tuple[str, ...]:
    """Why a rise may not be real correction: results too close together, or measured by
    different methods (whole blood direct ISE against laboratory serum/plasma). Empty when
    neither applies (common practice)."""
    doubts = []
    hours = (rise.end.time - rise.start.time).total_seconds() / 3600
    if hours < th.rise_confirm_within_hours:
        doubts.append(
            f"the two results are only {num(hours * 60, 0)} min apart "
            f"(less than {num(th.rise_confirm_within_hours)} h)"
        )
    if rise.start.direct_ise != rise.end.direct_ise:
        doubts.append(
            "one is whole blood by direct ISE (blood gas or point of care), the other a "
            "laboratory serum/plasma sodium"
        )
    return tuple(doubts)


def relowering_values(ctx: ClinicalContext, th: Thresholds) -> tuple[list[Value], list[str]]:
    """The European guideline's re-lowering amounts (Spasovski 2014, section 8.5): 10 mL/kg of
    electrolyte-free water over 1 h and desmopressin 2 µg IV not more often than every 8 h,
    both to be discussed with an expert. (values, text lines)."""
    weight = ctx.current.get(Analyte.BODY_WEIGHT)
    per_kg, minutes = th.relowering_free_water_ml_per_kg, th.relowering_free_water_minutes
    values = [Value(ValueName.DESMOPRESSIN_DOSE, th.desmopressin_relowering_ug)]
    if weight is not None and weight.value > 0:
        ml = per_kg * weight.value
        values.insert(0, Value(ValueName.FREE_WATER_RELOWERING, round(ml)))
        water = (
            f"electrolyte-free water (e.g. 5% dextrose) {num(per_kg, 0)} mL/kg over "
            f"{num(minutes, 0)} min: {num(ml, 0)} mL for {num(weight.value)} kg"
        )
    else:
        water = (
            f"electrolyte-free water (e.g. 5% dextrose) {num(per_kg, 0)} mL/kg over "
            f"{num(minutes, 0)} min (no body weight recorded)"
        )
    lines = [
        f"With an expert, consider re-lowering: {water}, watching urine output and fluid "
        "balance (Spasovski 2014, section 8.5).",
        f"With an expert, consider desmopressin {num(th.desmopressin_relowering_ug)} µg IV, "
        f"not repeated more often than every {num(th.desmopressin_min_interval_hours, 0)} h "
        "(Spasovski 2014, section 8.5).",
    ]
    return values, lines


def correction_finding(ctx: ClinicalContext, th: Thresholds) -> Finding | None:
    """CORRECTION_RATE when a rise exceeds a limit of the selected guidelines."""
    status = surveil(ctx, th)
    worst = None if status is None else status.worst
    if status is None or worst is None or worst.rise is None:
        return None
    limits, rise = status.limits, worst.rise
    values = [Value(ValueName.SERUM_SODIUM, round(status.latest.value, 1))]
    for name, r in (
        (ValueName.SODIUM_CHANGE_24H, status.rise_24h),
        (ValueName.SODIUM_CHANGE_48H, status.rise_48h),
    ):
        if r is not None:
            values.append(Value(name, round(r.amount, 1)))
    values.append(Value(ValueName.CORRECTION_LIMIT_24H, round(limits.limit_24h, 1)))
    doubts = rise_doubts(rise, th)
    details = []
    if doubts:
        details.append(
            "This step may be a method or sampling difference rather than correction: "
            + "; ".join(doubts)
            + ". Confirm with a laboratory serum sodium before acting on it."
        )
    for c in status.checks:
        if c.rise is None:
            continue
        state = "above" if c.exceeded else "within"
        details.append(
            f"{_GUIDELINE_NAME[c.guideline]}: rise {c.window} {signed(c.rise.amount)} "
            f"mmol/L ({num(c.rise.start.value)} at {c.rise.start.time:%Y-%m-%d %H:%M} to "
            f"{num(c.rise.end.value)} at {c.rise.end.time:%Y-%m-%d %H:%M} UTC), {state} its "
            f"limit of {num(c.limit)} mmol/L."
        )
    if limits.high_risk_reasons:
        details.append(
            "High risk of osmotic demyelination (Verbalis 2013): "
            + "; ".join(limits.high_risk_reasons)
            + f", so the US limit is {num(th.correction_limit_24h_high_risk)} mmol/L per 24 h."
        )
    relower_values, relower_lines = relowering_values(ctx, th)
    values += relower_values
    summary = (
        f"Sodium rose {num(rise.amount)} mmol/L {worst.window} ({num(rise.start.value)} to "
        f"{num(rise.end.value)}), above the {num(worst.limit)} mmol/L limit"
    )
    if doubts:
        summary += "; confirm with a lab sodium"
    points = [p for c in status.checks if c.rise is not None for p in (c.rise.start, c.rise.end)]
    return Finding(
        code=FindingCode.CORRECTION_RATE,
        urgency=Urgency.CRITICAL,
        summary=summary if len(summary) < 140 else summary[:138] + "…",
        details=tuple(details),
        values=tuple(values),
        inputs=tuple(used(r) for r in dict.fromkeys(points)),
        formulas=(
            f"Rise = {num(rise.end.value)} − {num(rise.start.value)} = {num(rise.amount)} "
            f"mmol/L {worst.window}; limit {num(worst.limit)} mmol/L",
        ),
        sources=tuple(
            dict.fromkeys(
                [
                    th.cite(worst.key),
                    *(th.cite(c.key) for c in status.checks),
                    th.cite("relowering_free_water_ml_per_kg"),
                ]
            )
        ),
        next_steps=(
            *(("Repeat a laboratory serum sodium now to confirm the rise.",) if doubts else ()),
            "Stop sodium-raising treatment (hypertonic saline, vaptans, potassium, isotonic "
            "saline in SIADH-like states) and seek expert advice.",
            *relower_lines,
            "Recheck sodium every few hours until the rise is back within the limit.",
        ),
        cautions=(CAUTION, "Osmotic demyelination can show days later: watch neurology."),
        extra={"overcorrection": True},
    )
