"""The current hyponatremic episode in a sodium series.

The episode is the latest run of consecutive hyponatremic results (sodium below the lower
normal limit), in time order; results after it (a sodium that has risen into the normal
range) still belong to the correction that follows it.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from cds_service.clinical.context import LabResult


def chronological(results: Iterable[LabResult]) -> tuple[LabResult, ...]:
    """Results sorted by time, ties broken by value and id so any input order gives one answer."""
    return tuple(sorted(results, key=lambda r: (r.time, r.value, r.source_id)))


@dataclass(frozen=True, slots=True)
class Episode:
    run: tuple[LabResult, ...]  # consecutive hyponatremic results, oldest first (non-empty)
    after: tuple[LabResult, ...]  # later results (normal again), oldest first
    last_normal_before: LabResult | None  # the normal result just before the run, if any

    def __post_init__(self) -> None:
        if not self.run:
            raise ValueError("an episode needs at least one hyponatremic result")

    @property
    def first_low(self) -> LabResult:
        return self.run[0]

    @property
    def nadir(self) -> LabResult:
        """Lowest sodium of the run (earliest if tied)."""
        return min(self.run, key=lambda r: (r.value, r.time))

    @property
    def surveillance(self) -> tuple[LabResult, ...]:
        """Results the correction-rate check looks at: the run and what followed it."""
        return self.run + self.after


#: The last answer for a tuple series: one evaluation asks 3-5 times (severity, surveillance,
#: limits, trend snapshot) about the same immutable tuple of frozen results.
_last: tuple[tuple[LabResult, ...], float, Episode | None] | None = None


def current_episode(series: Iterable[LabResult], lower_normal: float) -> Episode | None:
    """The latest hyponatremic run of ``series`` (None when no result is low)."""
    global _last
    last = _last
    if last is not None and last[0] is series and last[1] == lower_normal:
        return last[2]
    episode = _current_episode(series, lower_normal)
    if isinstance(series, tuple):  # immutable: the same object always has the same answer
        _last = (series, lower_normal, episode)
    return episode


def _current_episode(series: Iterable[LabResult], lower_normal: float) -> Episode | None:
    ordered = chronological(series)
    low = [i for i, r in enumerate(ordered) if r.value < lower_normal]
    if not low:
        return None
    end = low[-1]
    start = end
    while start > 0 and ordered[start - 1].value < lower_normal:
        start -= 1
    return Episode(
        run=ordered[start : end + 1],
        after=ordered[end + 1 :],
        last_normal_before=ordered[start - 1] if start > 0 else None,
    )
