"""FHIR date, dateTime and instant strings -> timezone-aware datetimes (UTC when unzoned)."""

from __future__ import annotations

import calendar
import re
from datetime import UTC, date, datetime
from functools import lru_cache

_PARTIAL = re.compile(r"^(\d{4})(?:-(\d{2}))?(?:-(\d{2}))?$")


def parse_datetime(value: object) -> datetime | None:
    """A FHIR dateTime/instant; partial dates ("2026", "2026-11") read as their first moment."""
    if not isinstance(value, str):
        return None
    return _parse_datetime(value)


@lru_cache(maxsize=8192)  # results of one draw share a time; datetimes are immutable
def _parse_datetime(value: str) -> datetime | None:
    s = value.strip()
    if not s:
        return None
    m = _PARTIAL.match(s)
    try:
        if m:
            year, month, day = int(m[1]), int(m[2] or 1), int(m[3] or 1)
            return datetime(year, month, day, tzinfo=UTC)
        dt = datetime.fromisoformat(s.replace("Z", "+00:00"))
    except ValueError:
        return None
    return dt if dt.tzinfo is not None else dt.replace(tzinfo=UTC)


def parse_birth_date(value: object) -> date | None:
    """A FHIR date; a partial date is read as its LAST day, the youngest age it allows.

    Reading "2008" as 31 December keeps a patient who may still be under 18 out of the adult
    calculations rather than in them.
    """
    if not isinstance(value, str):
        return None
    m = _PARTIAL.match(value.strip()[:10])
    if not m:
        return None
    try:
        year = int(m[1])
        month = int(m[2]) if m[2] else 12
        day = int(m[3]) if m[3] else calendar.monthrange(year, month)[1]
        return date(year, month, day)
    except ValueError:
        return None


def age_years(birth: date, now: datetime) -> float:
    """Age in (fractional) years on ``now``'s date."""
    today = now.date()
    years = today.year - birth.year - ((today.month, today.day) < (birth.month, birth.day))
    try:
        last = birth.replace(year=birth.year + years)
    except ValueError:  # 29 February
        last = date(birth.year + years, 3, 1)
    try:
        nxt = birth.replace(year=birth.year + years + 1)
    except ValueError:
        nxt = date(birth.year + years + 1, 3, 1)
    return years + (today - last).days / max((nxt - last).days, 1)
