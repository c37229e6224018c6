"""The feedback report: per finding code, how often cards were accepted, overridden or ignored.

Counting rules (ours):
- ``shown``: cards in the card log with that finding code.
- Each card counts once, by its latest feedback (latest ``outcomeTimestamp``, then latest
  received): a card first overridden and later accepted counts as accepted.
- ``ignored``: cards shown that never received feedback, so
  ``accepted + overridden + ignored == shown`` always.
- Rates are over cards shown; ``None`` when none were shown.
- Override reasons are counted over cards whose latest outcome is ``overridden``; a card
  overridden without a coded reason counts under ``(no reason given)``.
- Feedback for cards the log does not know (or knows under another service) is counted apart,
  by outcome, and never mixed into the per-code figures.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass

from sqlalchemy import case, func, select

from cds_service.store.database import Store
from cds_service.store.schema import CardLog, Feedback

NO_REASON = "(no reason given)"


@dataclass(frozen=True, slots=True)
class ReasonCount:
    code: str
    display: str | None
    count: int


@dataclass(frozen=True, slots=True)
class FindingFeedback:
    finding_code: str
    shown: int
    accepted: int
    overridden: int
    ignored: int
    override_reasons: tuple[ReasonCount, ...]

    def __post_init__(self) -> None:
        if min(self.shown, self.accepted, self.overridden, self.ignored) < 0:
            raise ValueError("counts cannot be negative")
        if self.accepted + self.overridden + self.ignored != self.shown:
            raise ValueError("accepted + overridden + ignored must equal shown")

    @property
    def acceptance_rate(self) -> float | None:
        return self.accepted / self.shown if self.shown else None

    @property
    def override_rate(self) -> float | None:
        return self.overridden / self.shown if self.shown else None


@dataclass(frozen=True, slots=True)
class FeedbackReport:
    findings: tuple[FindingFeedback, ...]
    unknown_card_feedback: dict[str, int]  # outcome -> items

    @property
    def unknown_card_total(self) -> int:
        return sum(self.unknown_card_feedback.values())

    def to_dict(self) -> dict:
        out = []
        for f in self.findings:
            row = asdict(f)
            row["acceptance_rate"] = f.acceptance_rate
            row["override_rate"] = f.override_rate
            out.append(row)
        return {
            "findings": out,
            "unknown_card_feedback": {
                "total": self.unknown_card_total,
                "by_outcome": dict(self.unknown_card_feedback),
            },
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True)

    def to_text(self) -> str:
        if not self.findings and not self.unknown_card_total:
            return "No cards logged and no feedback received yet."
        lines = [
            f"{'finding code':<32} {'shown':>6} {'accepted':>9} {'overridden':>11} "
            f"{'ignored':>8} {'accept %':>9} {'override %':>11}"
        ]
        for f in self.findings:
            lines.append(
                f"{f.finding_code:<32} {f.shown:>6} {f.accepted:>9} {f.overridden:>11} "
                f"{f.ignored:>8} {_pct(f.acceptance_rate):>9} {_pct(f.override_rate):>11}"
            )
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


def _pct(rate: float | None) -> str:
    return "-" if rate is None else f"{100 * rate:.1f}"


def feedback_report(store: Store) -> FeedbackReport:
    """Read the report from the store (one consistent read)."""
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
    joined = CardLog.__table__.outerjoin(final, final.c.card_uuid == CardLog.card_uuid)
    counts = (
        select(
            CardLog.finding_code,
            func.count(CardLog.id),
            func.sum(case((final.c.outcome == "accepted", 1), else_=0)),
            func.sum(case((final.c.outcome == "overridden", 1), else_=0)),
        )
        .select_from(joined)
        .group_by(CardLog.finding_code)
        .order_by(CardLog.finding_code)
    )
    reason_code = func.coalesce(final.c.override_reason_code, NO_REASON)
    reasons = (
        select(
            CardLog.finding_code,
            reason_code,
            func.max(final.c.override_reason_display),
            func.count(),
        )
        .select_from(joined)
        .where(final.c.outcome == "overridden")
        .group_by(CardLog.finding_code, reason_code)
    )
    unknown = (
        select(Feedback.outcome, func.count())
        .where(Feedback.unknown_card.is_(True))
        .group_by(Feedback.outcome)
    )
    with store.session() as s:
        count_rows = s.execute(counts).all()
        reason_rows = s.execute(reasons).all()
        unknown_rows = s.execute(unknown).all()
    by_code: dict[str, list[ReasonCount]] = {}
    for code, r_code, r_display, n in reason_rows:
        by_code.setdefault(code, []).append(ReasonCount(r_code, r_display, int(n)))
    findings = []
    for code, shown, accepted, overridden in count_rows:
        shown, accepted, overridden = int(shown), int(accepted or 0), int(overridden or 0)
        ranked = sorted(by_code.get(code, []), key=lambda r: (-r.count, r.code))
        findings.append(
            FindingFeedback(
                finding_code=code,
                shown=shown,
                accepted=accepted,
                overridden=overridden,
                ignored=shown - accepted - overridden,
                override_reasons=tuple(ranked),
            )
        )
    return FeedbackReport(
        findings=tuple(findings),
        unknown_card_feedback={outcome: int(n) for outcome, n in unknown_rows},
    )
