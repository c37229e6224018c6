"""Per-analyte series and the 'current' result the work-up uses.

* series: every usable result per analyte, oldest first (ties: final before preliminary).
* current: the latest result within the analyte's lookback (data/lookback.toml, overridden by
  IngestSettings.lookback_hours, else IngestSettings.default_lookback_hours).
* glucose and urea nitrogen are paired with the current sodium draw: the one closest in time
  within IngestSettings.pairing_hours (so never from another day's draw); none paired -> absent.
  Without a current sodium they fall back to their own latest within lookback.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterable, Mapping
from datetime import datetime, timedelta

from cds_service.clinical.context import Analyte, LabResult
from cds_service.config import IngestSettings
from cds_service.fhir._data import load

PAIRED = (Analyte.GLUCOSE, Analyte.UREA_NITROGEN)


def lookback(analyte: Analyte, settings: IngestSettings) -> timedelta:
    hours = settings.lookback_hours.get(analyte.value)
    if hours is None:
        hours = load("lookback")["lookback_hours"].get(analyte.value)
    if hours is None:
        hours = settings.default_lookback_hours
    return timedelta(hours=float(hours))


def build_series(results: Iterable[LabResult]) -> dict[Analyte, tuple[LabResult, ...]]:
    grouped: dict[Analyte, list[LabResult]] = defaultdict(list)
    for r in results:
        grouped[r.analyte].append(r)
    return {
        a: tuple(sorted(rs, key=lambda r: (r.time, not r.preliminary, r.source_id)))
        for a, rs in grouped.items()
    }


def _latest_within(series: tuple[LabResult, ...], since: datetime) -> LabResult | None:
    # series is sorted oldest first with final after preliminary at equal times
    for r in reversed(series):
        if r.time >= since:
            return r
        break
    return None


def choose_current(
    series: Mapping[Analyte, tuple[LabResult, ...]], now: datetime, settings: IngestSettings
) -> dict[Analyte, LabResult]:
    current: dict[Analyte, LabResult] = {}
    for analyte, rs in series.items():
        if analyte in PAIRED:
            continue
        latest = _latest_within(rs, now - lookback(analyte, settings))
        if latest is not None:
            current[analyte] = latest
    sodium = current.get(Analyte.SODIUM)
    window = timedelta(hours=settings.pairing_hours)
    for analyte in PAIRED:
        rs = series.get(analyte, ())
        if sodium is None:
            latest = _latest_within(rs, now - lookback(analyte, settings))
            if latest is not None:
                current[analyte] = latest
            continue
        near = [r for r in rs if abs(r.time - sodium.time) <= window]
        if near:
            current[analyte] = min(
                near, key=lambda r: (abs(r.time - sodium.time), r.time < sodium.time, r.preliminary)
            )
    return current
