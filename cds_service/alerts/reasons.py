"""Override reasons that change what is shown, and the quiet each one gives.

The cards offer them in ``overrideReasons`` (``hooks/cards.py`` adds them); a clinician's
``overridden`` feedback with one of these codes becomes a :class:`~cds_service.alerts.policy.Quiet`
(``store/feedback.py`` writes it). Their wording and effect live in ``data/alerts.toml``.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Literal

from cds_service.alerts.policy import AlertSettings, Quiet, data

Effect = Literal["timed", "until-inputs-change", "record-only"]


@dataclass(frozen=True, slots=True)
class QuietingReason:
    code: str
    display: str  # may hold {hours}
    effect: Effect


def quieting_reasons() -> tuple[QuietingReason, ...]:
    out = []
    for code, entry in data().get("reason", {}).items():
        effect = entry["effect"]
        if effect not in ("timed", "until-inputs-change", "record-only"):
            raise ValueError(f"alerts.toml reason {code}: unknown effect {effect!r}")
        out.append(QuietingReason(code, entry["display"], effect))
    return tuple(out)


def reason_displays(indicator: str, settings: AlertSettings) -> list[tuple[str, str]]:
    """(code, display) of each quieting reason for a card of this indicator: the display says
    what choosing it does, with the hours in force for this card."""
    hours = f"{settings.quiet_for(indicator).total_seconds() / 3600:g}"
    out = []
    for r in quieting_reasons():
        display = r.display.format(hours=hours)
        if r.effect == "until-inputs-change" and indicator == "critical":
            cap = f"{settings.critical_quiet_max.total_seconds() / 3600:g}"
            display = f"{display} (at most {cap} h for a critical card)"
        out.append((r.code, display))
    return out


def quiet_for_override(
    reason_code: str | None,
    *,
    code: str,
    indicator: str,
    inputs_digest: str | None,
    settings: AlertSettings,
    at: datetime,
) -> Quiet | None:
    """The quiet a clinician's override gives, or None (no reason, or one that hides
    nothing). ``at``: when the override was given."""
    if reason_code is None:
        return None
    reason = next((r for r in quieting_reasons() if r.code == reason_code), None)
    if reason is None or reason.effect == "record-only":
        return None
    if reason.effect == "timed":
        return Quiet(code, reason_code, at + settings.quiet_for(indicator), None, indicator, at)
    if inputs_digest is None:
        return None  # nothing to compare later inputs with
    until = at + settings.critical_quiet_max if indicator == "critical" else None
    return Quiet(code, reason_code, until, inputs_digest, indicator, at)
