"""Severity of hyponatremia by sodium, and acuity from serial results.

Severity bands and the 48-hour acuity rule follow the 2014 European clinical practice
guideline (Spasovski 2014); the numbers come from ``Thresholds``.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime, timedelta
from enum import StrEnum

from cds_service.clinical.context import LabResult
from cds_service.clinical.episode import current_episode
from cds_service.clinical.thresholds import Thresholds


class Severity(StrEnum):
    MILD = "mild"
    MODERATE = "moderate"
    PROFOUND = "profound"


class Acuity(StrEnum):
    ACUTE = "acute"  # documented to have developed within 48 h
    CHRONIC = "chronic"  # documented for more than 48 h
    UNKNOWN = "unknown"  # cannot tell: the guideline says treat as chronic


#: Rank of each severity, for comparisons.
SEVERITY_RANK: dict[Severity, int] = {Severity.MILD: 1, Severity.MODERATE: 2, Severity.PROFOUND: 3}


def severity(sodium: float, th: Thresholds) -> Severity | None:
    """mild 130-134, moderate 125-129, profound < 125 mmol/L; None when not hyponatremic."""
    if sodium >= th.sodium_lower_normal:
        return None
    if sodium >= th.severity_mild_lower:
        return Severity.MILD
    if sodium >= th.severity_moderate_lower:
        return Severity.MODERATE
    return Severity.PROFOUND


def acuity(series: Iterable[LabResult], now: datetime, th: Thresholds) -> Acuity:
    """Acute when the last normal sodium lies within 48 h of ``now`` (so the episode cannot be
    older); chronic when a low sodium is documented more than 48 h ago; otherwise unknown."""
    episode = current_episode(series, th.sodium_lower_normal)
    if episode is None:
        return Acuity.UNKNOWN
    window = timedelta(hours=th.acute_onset_hours)
    if now - episode.first_low.time > window:
        return Acuity.CHRONIC
    normal = episode.last_normal_before
    if normal is not None and now - normal.time <= window:
        return Acuity.ACUTE
    return Acuity.UNKNOWN
