"""The feedback report: per finding code, and per finding code and week, how many findings
were evaluated, shown, suppressed or kept silent, and how the cards shown were answered.

Counting rules (ours):
- ``evaluated``: card-log rows with that finding code (findings switched off are never
  logged), ``evaluated == shown + suppressed + silent``.
- ``shown``: cards returned to a client; ``suppressed``: kept back as a repeat or by a
  clinician's override; ``silent``: kept back by a silent setting (would-be cards).
- Each card shown counts once, by its latest feedback (latest ``outcomeTimestamp``, then latest
  received): a card first overridden and later accepted counts as accepted.
- ``ignored``: cards shown that never received feedback, so
  ``accepted + overridden + ignored == shown`` always.
- Rates are over cards shown; ``None`` when none were shown.
- Override reasons are counted over cards whose latest outcome is ``overridden``; a card
  overridden without a coded reason counts under ``(no reason given)``.
- Weeks start on Monday, 00:00 UTC, and are named by that date; a card counts in the week it
  was evaluated, whenever its feedback came.
- Filters: cards evaluated from ``since`` (inclusive) to ``until`` (exclusive), one service;
  calls made by ``tonicity replay`` are left out unless ``include_replay``.
- Feedback stored flagged ``unknown_card`` (before feedback was checked against the card
  log; now refused) is counted apart, by outcome, never mixed into the figures.
"""

from __future__ import annotations

import csv
import io
import json
from collections import defaultdict
from dataclasses import asdict, dataclass, field
from datetime import date, datetime, timedelta
from typing import Any

from sqlalchemy import case, func, select

from cds_service.store.database import Store, as_utc
from cds_service.store.schema import CardLog, Feedback

NO_REASON = "(no reason given)"

#: Columns of the CSV export, in order.
CSV_COLUMNS = (
    "week",
    "finding_code",
    "evaluated",
    "shown",
    "suppressed",
    "silent",
    "accepted",
    "overridden",
    "ignored",
    "acceptance_rate",
    "override_reasons",
)


@dataclass(frozen=True, slots=True)
class ReasonCount:
    code: str
    display: str | None
    count: int


@dataclass(frozen=True, slots=True)
class ReportFilter:
    """Which cards a report counts."""

    since: datetime | None = None
    until: datetime | None = None
    service: str | None = None
    include_replay: bool = False

    def __post_init__(self) -> None:
        for name in ("since", "until"):
            value = getattr(self, name)
            if value is not None and value.tzinfo is None:
                raise ValueError(f"{name} must carry a time zone")
        if self.since and self.until and self.since >= self.until:
            raise ValueError("since must be before until")

    def as_dict(self) -> dict[str, Any]:
        return {
            "since": self.since.isoformat() if self.since else None,
            "until": self.until.isoformat() if self.until else None,
            "service": self.service,
            "include_replay": self.include_replay,
        }


@dataclass(frozen=True, slots=True)
class FindingFeedback:
    finding_code: str
    shown: int
    accepted: int
    overridden: int
    ignored: int
    override_reasons: tuple[ReasonCount, ...]
    suppressed: int = 0
    silent: int = 0
    week: str | None = None  # Monday of the week (ISO date), None for all weeks together

    def __post_init__(self) -> None:
        counts = (self.shown, self.accepted, self.overridden, self.ignored)
        if min(*counts, self.suppressed, self.silent) < 0:
            raise ValueError("counts cannot be negative")
        if self.accepted + self.overridden + self.ignored != self.shown:
            raise ValueError("accepted + overridden + ignored must equal shown")

    @property
    def evaluated(self) -> int:
        return self.shown + self.suppressed + self.silent

    @property
    def acceptance_rate(self) -> float | None:
        return self.accepted / self.shown if self.shown else None

    @property
    def override_rate(self) -> float | None:
        return self.overridden / self.shown if self.shown else None

    def to_dict(self) -> dict[str, Any]:
        row = asdict(self)
        row["evaluated"] = self.evaluated
        row["acceptance_rate"] = self.acceptance_rate
        row["override_rate"] = self.override_rate
        return row


@dataclass(frozen=True, slots=True)
class FeedbackReport:
    findings: tuple[FindingFeedback, ...]  # per finding code, all weeks
    unknown_card_feedback: dict[str, int]  # outcome -> items
    weeks: tuple[FindingFeedback, ...] = ()  # per finding code and week
    filter: ReportFilter = field(default_factory=ReportFilter)

    @property
    def unknown_card_total(self) -> int:
        return sum(self.unknown_card_feedback.values())

    @property
    def week_starts(self) -> list[str]:
        return sorted({w.week for w in self.weeks if w.week})

    def to_dict(self) -> dict:
        return {
            "filter": self.filter.as_dict(),
            "findings": [f.to_dict() for f in self.findings],
            "weeks": [w.to_dict() for w in self.weeks],
            "unknown_card_feedback": {
                "total": self.unknown_card_total,
                "by_outcome": dict(self.unknown_card_feedback),
            },
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True)

    def to_csv(self) -> str:
        """One row per week and finding code (reasons as ``code=n`` joined by ``;``)."""
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(CSV_COLUMNS)
        for w in self.weeks:
            rate = w.acceptance_rate
            writer.writerow(
                (
                    w.week,
                    w.finding_code,
                    w.evaluated,
                    w.shown,
                    w.suppressed,
                    w.silent,
                    w.accepted,
                    w.overridden,
                    w.ignored,
                    "" if rate is None else f"{rate:.4f}",
                    ";".join(f"{r.code}={r.count}" for r in w.override_reasons),
                )
            )
        return out.getvalue()

    def to_text(self) -> str:
        if not self.findings and not self.unknown_card_total:
            return "No cards logged and no feedback received yet."
        lines = [_filter_line(self.filter), "", "All weeks:", *_table(self.findings)]
        for week in self.week_starts:
            lines += ["", f"Week of {week}:"]
            lines += _table([w for w in self.weeks if w.week == week])
        reasons = [(f.finding_code, r) for f in self.findings for r in f.override_reasons]
        if reasons:
            lines += ["", "Override reasons chosen:"]
            for code, r in reasons:
                label = f"{r.code} ({r.display})" if r.display else r.code
                lines.append(f"  {code}: {label} x{r.count}")
        lines += ["", f"Feedback for unknown cards (not counted above): {self.unknown_card_total}"]
        for outcome, n in sorted(self.unknown_card_feedback.items()):
            lines.append(f"  {outcome}: {n}")
        return "\n".join(lines)


def _filter_line(f: ReportFilter) -> str:
    since = f.since.strftime("%Y-%m-%d %H:%M UTC") if f.since else "the first card"
    until = f.until.strftime("%Y-%m-%d %H:%M UTC") if f.until else "now"
    service = f.service or "all services"
    replay = "replay traffic included" if f.include_replay else "replay traffic left out"
    return f"Cards evaluated from {since} to {until}, {service}, {replay}."


def _table(rows: Any) -> list[str]:
    lines = [
        f"{'finding code':<32} {'evaluated':>9} {'shown':>6} {'suppressed':>10} {'silent':>6} "
        f"{'accepted':>8} {'overridden':>10} {'ignored':>7} {'accept %':>8}"
    ]
    for f in rows:
        lines.append(
            f"{f.finding_code:<32} {f.evaluated:>9} {f.shown:>6} {f.suppressed:>10} "
            f"{f.silent:>6} {f.accepted:>8} {f.overridden:>10} {f.ignored:>7} "
            f"{_pct(f.acceptance_rate):>8}"
        )
    return lines


def _pct(rate: float | None) -> str:
    return "-" if rate is None else f"{100 * rate:.1f}"


def _day(store: Store) -> Any:
    """The UTC calendar day of ``created_at`` as ``YYYY-MM-DD`` text, on either database."""
    if store.engine.dialect.name == "postgresql":
        return func.to_char(func.timezone("UTC", CardLog.created_at), "YYYY-MM-DD")
    return func.strftime("%Y-%m-%d", CardLog.created_at)


def _week(day: object) -> str:
    d = day if isinstance(day, date) else date.fromisoformat(str(day)[:10])
    return (d - timedelta(days=d.weekday())).isoformat()


def _conditions(f: ReportFilter) -> list[Any]:
    out: list[Any] = []
    if f.since is not None:
        out.append(CardLog.created_at >= as_utc(f.since))
    if f.until is not None:
        out.append(CardLog.created_at < as_utc(f.until))
    if f.service:
        out.append(CardLog.service_id == f.service)
    if not f.include_replay:
        out.append(CardLog.replay_call.is_(None))
    return out


def feedback_report(store: Store, report_filter: ReportFilter | None = None) -> FeedbackReport:
    """Read the report from the store (one consistent read)."""
    flt = report_filter or ReportFilter()
    latest = (
        select(
            Feedback.card_uuid,
            Feedback.outcome,
            Feedback.override_reason_code,
            Feedback.override_reason_display,
            func.row_number()
            .over(
                partition_by=Feedback.card_uuid,
                order_by=(
                    Feedback.outcome_at.desc(),
                    Feedback.received_at.desc(),
                    Feedback.id.desc(),
                ),
            )
            .label("rank"),
        )
        .where(Feedback.unknown_card.is_(False))
        .subquery()
    )
    final = select(latest).where(latest.c.rank == 1).subquery()
    joined = CardLog.__table__.outerjoin(
        final, (final.c.card_uuid == CardLog.card_uuid) & (CardLog.action == "show")
    )
    day = _day(store).label("day")
    where = _conditions(flt)
    counts = (
        select(
            CardLog.finding_code,
            day,
            func.sum(case((CardLog.action == "show", 1), else_=0)),
            func.sum(case((CardLog.action == "suppressed", 1), else_=0)),
            func.sum(case((CardLog.action == "silent", 1), else_=0)),
            func.sum(case((final.c.outcome == "accepted", 1), else_=0)),
            func.sum(case((final.c.outcome == "overridden", 1), else_=0)),
        )
        .select_from(joined)
        .where(*where)
        .group_by(CardLog.finding_code, day)
    )
    reason_code = func.coalesce(final.c.override_reason_code, NO_REASON)
    reasons = (
        select(
            CardLog.finding_code,
            day,
            reason_code,
            func.max(final.c.override_reason_display),
            func.count(),
        )
        .select_from(joined)
        .where(final.c.outcome == "overridden", *where)
        .group_by(CardLog.finding_code, day, reason_code)
    )
    unknown = (
        select(Feedback.outcome, func.count())
        .where(Feedback.unknown_card.is_(True))
        .group_by(Feedback.outcome)
    )
    if flt.service:
        unknown = unknown.where(Feedback.service_id == flt.service)
    with store.session() as s:
        count_rows = s.execute(counts).all()
        reason_rows = s.execute(reasons).all()
        unknown_rows = s.execute(unknown).all()

    tallies: dict[tuple[str, str], list[int]] = defaultdict(lambda: [0, 0, 0, 0, 0])
    for code, d, *numbers in count_rows:
        tally = tallies[(code, _week(d))]
        for i, n in enumerate(numbers):
            tally[i] += int(n or 0)
    why: dict[tuple[str, str], dict[str, list[Any]]] = defaultdict(dict)
    for code, d, r_code, r_display, n in reason_rows:
        slot = why[(code, _week(d))].setdefault(r_code, [r_display, 0])
        slot[0] = slot[0] or r_display
        slot[1] += int(n)
    weeks = [
        _finding(code, week, tally, why.get((code, week), {}))
        for (code, week), tally in sorted(tallies.items(), key=lambda kv: (kv[0][1], kv[0][0]))
    ]
    return FeedbackReport(
        findings=tuple(_totals(weeks)),
        unknown_card_feedback={outcome: int(n) for outcome, n in unknown_rows},
        weeks=tuple(weeks),
        filter=flt,
    )


def _finding(
    code: str, week: str | None, tally: list[int], reasons: dict[str, list[Any]]
) -> FindingFeedback:
    shown, suppressed, silent, accepted, overridden = tally
    ranked = sorted(
        (ReasonCount(c, d, n) for c, (d, n) in reasons.items()), key=lambda r: (-r.count, r.code)
    )
    return FindingFeedback(
        finding_code=code,
        shown=shown,
        accepted=accepted,
        overridden=overridden,
        ignored=shown - accepted - overridden,
        override_reasons=tuple(ranked),
        suppressed=suppressed,
        silent=silent,
        week=week,
    )


def _totals(weeks: list[FindingFeedback]) -> list[FindingFeedback]:
    tallies: dict[str, list[int]] = defaultdict(lambda: [0, 0, 0, 0, 0])
    reasons: dict[str, dict[str, list[Any]]] = defaultdict(dict)
    for w in weeks:
        t = tallies[w.finding_code]
        for i, n in enumerate((w.shown, w.suppressed, w.silent, w.accepted, w.overridden)):
            t[i] += n
        for r in w.override_reasons:
            slot = reasons[w.finding_code].setdefault(r.code, [r.display, 0])
            slot[0] = slot[0] or r.display
            slot[1] += r.count
    return [_finding(code, None, t, reasons[code]) for code, t in sorted(tallies.items())]


def _day_bound(value: str | None, name: str) -> datetime | None:
    from datetime import UTC

    from cds_service.errors import UserError

    if value is None or not str(value).strip():
        return None
    text = str(value).strip()
    try:
        moment = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise UserError(f"{name} {text[:40]!r} is not a date (YYYY-MM-DD)") from None
    return moment if moment.tzinfo else moment.replace(tzinfo=UTC)


def parse_filter(
    since: str | None, until: str | None, service: str | None, include_replay: bool
) -> ReportFilter:
    """A filter from text (command line or query string); UserError when malformed."""
    from cds_service.errors import UserError

    try:
        return ReportFilter(
            since=_day_bound(since, "since"),
            until=_day_bound(until, "until"),
            service=(service or "").strip() or None,
            include_replay=include_replay,
        )
    except ValueError as exc:
        raise UserError(str(exc)) from None
