"""Which findings of one evaluation are shown: the pure decision, no I/O.

The live service and the rehearsal over a Bulk Data export both call :func:`decide`; the
live service reads ``history`` and ``quiets`` from the database, the rehearsal keeps them in
memory, so both apply the same rules, in this order for each finding:

1. ``off`` (configuration): not evaluated further, not logged.
2. The indicator is raised or lowered as configured (a critical finding is never lowered
   without ``alerts.unsafe_allow_silencing_critical``).
3. An active clinician's override (:class:`Quiet`) hides it: a timed one until its end, an
   "until the inputs change" one while the inputs digest is the same; neither once the
   indicator rose above the one overridden; for a critical card, never past
   ``critical_quiet_max`` after the override.
4. A critical card is otherwise always shown: it is never hidden merely because it was shown.
5. A non-critical card is hidden when the same finding with the same inputs digest and an
   indicator at least as high was shown within its window (repeat suppression).
6. ``silent`` (the finding or the whole service): logged with what would have happened,
   never returned.

``history`` and ``quiets`` are those of the scope (the patient, or the patient and user) and
of the service; the caller selects them.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from functools import cache
from importlib import resources
from typing import Any, Literal

from cds_service.clinical.findings import Finding, FindingCode
from cds_service.errors import UserError

Action = Literal["show", "suppressed", "silent", "off"]
Mode = Literal["show", "silent", "off"]

RANK = {"info": 0, "warning": 1, "critical": 2}

#: The loudly named key without which nothing critical is silenced, switched off or lowered.
UNSAFE_KEY = "alerts.unsafe_allow_silencing_critical"


@cache
def data() -> dict[str, Any]:
    """``alerts/data/alerts.toml`` (parsed once)."""
    text = resources.files("cds_service.alerts").joinpath("data", "alerts.toml").read_text("utf-8")
    return tomllib.loads(text)


def _hours(value: float) -> timedelta:
    return timedelta(hours=float(value))


@dataclass(frozen=True, slots=True)
class FindingRule:
    """One finding code's effective settings (data-file defaults, then configuration)."""

    mode: Mode = "show"
    window: timedelta = timedelta(hours=12)
    raise_to: str | None = None
    lower_to: str | None = None
    can_be_critical: bool = False


@dataclass(frozen=True, slots=True)
class AlertSettings:
    """The alert-burden part of the configuration (built once, checked when built)."""

    suppression: bool = True
    scope: Literal["patient", "patient-and-user"] = "patient"
    silent_services: frozenset[str] = frozenset()
    rules: Mapping[str, FindingRule] = field(default_factory=dict)
    default_window: timedelta = timedelta(hours=12)
    managed_quiet: timedelta = timedelta(hours=8)
    critical_quiet_max: timedelta = timedelta(hours=4)
    unsafe_allow_silencing_critical: bool = False
    quality_page: bool = True

    @classmethod
    def default(cls) -> AlertSettings:
        """The data file's defaults, nothing configured."""
        return cls.from_config(None)

    @classmethod
    def from_settings(cls, settings: Any, services: Iterable[str] | None = None) -> AlertSettings:
        """From ``settings.alerts`` (``cds_service.config.AlertsConfig``); ``services``, when
        given, are the service ids ``silent_services`` may name. UserError when refused."""
        return cls.from_config(getattr(settings, "alerts", None), services)

    @classmethod
    def from_config(cls, config: Any, services: Iterable[str] | None = None) -> AlertSettings:
        table = data()
        defaults = table["defaults"]
        per_code = table.get("finding", {})
        unknown = sorted(set(per_code) - {c.value for c in FindingCode})
        if unknown:
            raise ValueError(f"alerts.toml names unknown finding codes: {unknown}")
        configured = dict(getattr(config, "findings", {}) or {})
        bad = sorted(set(configured) - {c.value for c in FindingCode})
        if bad:
            raise UserError(f"alerts.findings: {bad[0]!r} is not a finding code")
        unsafe = bool(getattr(config, "unsafe_allow_silencing_critical", False))
        default_window = _hours(defaults["window_hours"])
        rules: dict[str, FindingRule] = {}
        for code in FindingCode:
            entry = per_code.get(code.value, {})
            mine = configured.get(code.value)
            window = entry.get("window_hours")
            rule = FindingRule(
                mode=getattr(mine, "mode", "show"),
                window=_hours(window) if window is not None else default_window,
                raise_to=getattr(mine, "raise_to", None),
                lower_to=getattr(mine, "lower_to", None),
                can_be_critical=bool(entry.get("can_be_critical", False)),
            )
            if mine is not None and mine.window_hours is not None:
                rule = _replace(rule, window=_hours(mine.window_hours))
            _check_rule(code.value, rule, unsafe)
            rules[code.value] = rule
        silent = frozenset(getattr(config, "silent_services", ()) or ())
        if services is not None:
            unknown_services = sorted(silent - set(services))
            if unknown_services:
                raise UserError(f"alerts.silent_services: no service {unknown_services[0]!r}")
        if silent and not unsafe:
            raise UserError(
                "alerts.silent_services silences critical cards too (overcorrection, profound "
                f"hyponatremia): set {UNSAFE_KEY} = true to confirm a silent go-live"
            )
        managed = getattr(config, "managed_quiet_hours", None) or defaults["managed_quiet_hours"]
        cap = (
            getattr(config, "critical_quiet_max_hours", None)
            or defaults["critical_quiet_max_hours"]
        )
        return cls(
            suppression=bool(getattr(config, "suppression", True)),
            scope=getattr(config, "scope", "patient"),
            silent_services=silent,
            rules=rules,
            default_window=default_window,
            managed_quiet=_hours(managed),
            critical_quiet_max=_hours(cap),
            unsafe_allow_silencing_critical=unsafe,
            quality_page=bool(getattr(config, "quality_page", True)),
        )

    def rule(self, code: str) -> FindingRule:
        return self.rules.get(code) or FindingRule(window=self.default_window)

    @property
    def max_window(self) -> timedelta:
        """How far back repeat suppression looks (the longest window of any finding)."""
        return max((r.window for r in self.rules.values()), default=self.default_window)

    def quiet_for(self, indicator: str) -> timedelta:
        """How long "already being managed" hides a card of this indicator."""
        if indicator == "critical":
            return min(self.managed_quiet, self.critical_quiet_max)
        return self.managed_quiet

    def indicator(self, code: str, core: str) -> str:
        """The indicator shown for a finding the clinical core rated ``core``."""
        rule = self.rule(code)
        out = core
        if rule.raise_to and RANK[rule.raise_to] > RANK[out]:
            out = rule.raise_to
        if rule.lower_to and RANK[rule.lower_to] < RANK[out]:
            if core != "critical" or self.unsafe_allow_silencing_critical:
                out = rule.lower_to
        return out

    def as_dict(self) -> dict[str, Any]:
        """What is live, as plain data (the digest is over this)."""
        return {
            "suppression": self.suppression,
            "scope": self.scope,
            "silent_services": sorted(self.silent_services),
            "default_window_hours": self.default_window.total_seconds() / 3600,
            "managed_quiet_hours": self.managed_quiet.total_seconds() / 3600,
            "critical_quiet_max_hours": self.critical_quiet_max.total_seconds() / 3600,
            "unsafe_allow_silencing_critical": self.unsafe_allow_silencing_critical,
            "findings": {
                code: {
                    "mode": r.mode,
                    "window_hours": r.window.total_seconds() / 3600,
                    "raise_to": r.raise_to,
                    "lower_to": r.lower_to,
                }
                for code, r in sorted(self.rules.items())
            },
        }

    @property
    def digest(self) -> str:
        """A short digest of the active settings, reported by discovery and ``/readyz``."""
        canonical = json.dumps(self.as_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()[:16]

    def quiet_codes(self, service_id: str) -> tuple[list[str], list[str]]:
        """(silent codes, off codes) of a service: the whole list when the service is silent."""
        if service_id in self.silent_services:
            return [c.value for c in FindingCode], []
        silent = sorted(c for c, r in self.rules.items() if r.mode == "silent")
        off = sorted(c for c, r in self.rules.items() if r.mode == "off")
        return silent, off


def _replace(rule: FindingRule, **changes: Any) -> FindingRule:
    values = {name: getattr(rule, name) for name in FindingRule.__slots__}
    values.update(changes)
    return FindingRule(**values)


def _check_rule(code: str, rule: FindingRule, unsafe: bool) -> None:
    if rule.raise_to and rule.lower_to:
        raise UserError(f"alerts.findings.{code}: raise_to and lower_to together")
    if not rule.can_be_critical or unsafe:
        return
    if rule.mode != "show":
        raise UserError(
            f"alerts.findings.{code}.mode = {rule.mode!r}: this finding can be critical; "
            f"set {UNSAFE_KEY} = true to confirm"
        )
    if rule.lower_to:
        raise UserError(
            f"alerts.findings.{code}.lower_to: this finding can be critical and is never "
            f"lowered without {UNSAFE_KEY} = true"
        )


@dataclass(frozen=True, slots=True)
class Shown:
    """One earlier card for the same patient (and user, when suppression is per user)."""

    code: str
    indicator: str
    inputs_digest: str
    at: datetime
    #: True for a card a silent setting kept back that would have been shown: it counts for
    #: later silent decisions only, never to hide a card from a clinician who never saw it.
    silent: bool = False


@dataclass(frozen=True, slots=True)
class Quiet:
    """A clinician's override that quiets a finding for a patient."""

    code: str
    reason: str
    until: datetime | None  # None: until the inputs change
    inputs_digest: str | None  # the inputs the override was given on
    indicator: str | None = None  # the indicator overridden: a higher one lifts the quiet
    since: datetime | None = None  # when the override was given (bounds critical quiets)


@dataclass(frozen=True, slots=True)
class Decision:
    code: str
    indicator: str
    inputs_digest: str
    action: Action
    why: str  # one line, for the card log and audit
    #: For a silent decision: whether the card would have been shown had it been live.
    would_show: bool = False

    @property
    def seen(self) -> bool:
        """Counts as shown for later repeat suppression (see :class:`Shown` ``silent``)."""
        return self.action == "show" or (self.action == "silent" and self.would_show)


def inputs_digest(finding: Finding) -> str:
    """A digest of what a finding rests on: the results it used (by id and value) and its
    values. A new result or a changed number gives a new digest."""
    parts = sorted(f"{i.source_id}={i.value}{i.unit}" for i in finding.inputs)
    parts += sorted(f"{v.name}={v.value}" for v in finding.values)
    if finding.remove_draft:
        parts.append(f"draft={finding.remove_draft}")
    return hashlib.sha256("\n".join(parts).encode()).hexdigest()[:32]


def _utc(moment: datetime) -> str:
    return moment.strftime("%Y-%m-%d %H:%M UTC")


def _hours_text(delta: timedelta) -> str:
    return f"{delta.total_seconds() / 3600:g} h"


def _active_quiet(
    quiets: Sequence[Quiet],
    code: str,
    indicator: str,
    digest: str,
    critical: bool,
    settings: AlertSettings,
    now: datetime,
) -> Quiet | None:
    for q in quiets:
        if q.code != code:
            continue
        if q.indicator is not None and RANK.get(indicator, 0) > RANK.get(q.indicator, 0):
            continue  # a higher indicator shows it again at once
        if q.inputs_digest is not None and q.inputs_digest != digest:
            continue
        end = q.until
        if critical:
            if q.since is None and q.until is None:
                continue  # an unbounded quiet never hides a critical card
            if q.since is not None:
                cap = q.since + settings.critical_quiet_max
                end = cap if end is None else min(end, cap)
        if end is not None and now >= end:
            continue
        return q
    return None


def _live(
    code: str,
    indicator: str,
    digest: str,
    critical: bool,
    history: Sequence[Shown],
    quiets: Sequence[Quiet],
    settings: AlertSettings,
    now: datetime,
    *,
    silent: bool,
) -> tuple[Action, str]:
    """What would happen to this finding were it live: ("show" | "suppressed", why)."""
    quiet = _active_quiet(quiets, code, indicator, digest, critical, settings, now)
    if quiet is not None:
        until = f" until {_utc(quiet.until)}" if quiet.until else " until the results change"
        return "suppressed", f"overridden by a clinician ({quiet.reason}){until}"
    if critical:
        return "show", "critical: shown on every evaluation until a clinician overrides it"
    if not settings.suppression:
        return "show", "shown (repeat suppression is off)"
    window = settings.rule(code).window
    same_code = [h for h in history if h.code == code and (silent or not h.silent)]
    repeats = [
        h.at
        for h in same_code
        if h.inputs_digest == digest
        and RANK.get(h.indicator, 0) >= RANK.get(indicator, 0)
        and timedelta(0) <= now - h.at < window
    ]
    if repeats:
        last = max(repeats)
        return "suppressed", (
            f"repeat: shown {_utc(last)} on the same results, within its "
            f"{_hours_text(window)} window"
        )
    if not same_code:
        return "show", "shown: first time in this scope"
    if any(h.inputs_digest == digest for h in same_code):
        if any(RANK.get(indicator, 0) > RANK.get(h.indicator, 0) for h in same_code):
            return "show", "shown: indicator rose"
        return "show", f"shown: its {_hours_text(window)} window passed"
    return "show", "shown: results changed since last shown"


def latest_per_kind(history: Iterable[Shown], now: datetime) -> list[Shown]:
    """``history`` cut to what :func:`decide` reads of it: per code, indicator, inputs digest
    and silent flag, the latest card at or before ``now`` and the earliest after it (another
    replica's clock may run ahead). :func:`decide` gives the same decisions, reasons
    included, on both (tests/alerts/test_policy.py holds that law); the store reads the cut
    form (``store.cards.recent``), so a chart opened a thousand times in the window costs
    one row per kind of card, not a thousand."""
    latest: dict[tuple[str, str, str, bool], Shown] = {}
    ahead: dict[tuple[str, str, str, bool], Shown] = {}
    for h in history:
        kind = (h.code, h.indicator, h.inputs_digest, h.silent)
        if h.at <= now:
            if kind not in latest or h.at > latest[kind].at:
                latest[kind] = h
        elif kind not in ahead or h.at < ahead[kind].at:
            ahead[kind] = h
    return [*latest.values(), *ahead.values()]


def decide(
    findings: Sequence[Finding],
    *,
    service_id: str,
    history: Sequence[Shown],
    quiets: Sequence[Quiet],
    settings: AlertSettings,
    now: datetime,
) -> list[Decision]:
    """One decision per finding, in the order given (see the module doc for the rules)."""
    out: list[Decision] = []
    service_silent = service_id in settings.silent_services
    for f in findings:
        code = f.code.value
        core = f.urgency.value
        rule = settings.rule(code)
        indicator = settings.indicator(code, core)
        digest = inputs_digest(f)
        critical = "critical" in (core, indicator)
        guarded = critical and not settings.unsafe_allow_silencing_critical
        if rule.mode == "off" and not guarded:
            out.append(Decision(code, indicator, digest, "off", f"alerts.findings.{code} is off"))
            continue
        silent = (service_silent or rule.mode == "silent") and not guarded
        action, why = _live(
            code, indicator, digest, critical, history, quiets, settings, now, silent=silent
        )
        if silent:
            where = "service in silent go-live" if service_silent else f"{code} set silent"
            would = "would have been shown" if action == "show" else f"would be {why}"
            out.append(
                Decision(code, indicator, digest, "silent", f"{where}; {would}", action == "show")
            )
        else:
            out.append(Decision(code, indicator, digest, action, why))
    return out
