"""The clinical core's two entry points: the patient-view work-up and the order checks.

Both apply the adult-scope gate first (under 18 years: one OUT_OF_SCOPE finding and nothing
else), add correction-rate surveillance and the results that were not used (IMPLAUSIBLE),
and return at most one finding per code.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import replace

from cds_service.clinical.context import Analyte, ClinicalContext, RejectedResult
from cds_service.clinical.correction import correction_finding
from cds_service.clinical.findings import Finding, FindingCode, InputUsed, Urgency
from cds_service.clinical.notes import CAUTION, LABELS, num, shorten
from cds_service.clinical.orders import order_findings
from cds_service.clinical.thresholds import Thresholds
from cds_service.clinical.workup import workup_findings

__all__ = ["evaluate_orders", "evaluate_workup"]

#: Findings are returned most urgent first (stable within one urgency).
_URGENCY_ORDER = {Urgency.CRITICAL: 0, Urgency.WARNING: 1, Urgency.INFO: 2}


def _out_of_scope(ctx: ClinicalContext, th: Thresholds) -> Finding | None:
    age = ctx.patient.age_years
    if age is None or age >= th.adult_age_years:
        return None
    return Finding(
        code=FindingCode.OUT_OF_SCOPE,
        urgency=Urgency.INFO,
        summary=(
            f"Patient is {num(age, 0)} years old: Tonicity covers adults "
            f"({num(th.adult_age_years, 0)} and over) and made no calculation"
        ),
        details=(
            "Adult formulas, thresholds and body-water fractions do not apply to "
            "children; use a paediatric protocol.",
        ),
        sources=(th.cite("adult_age_years"),),
        cautions=(CAUTION,),
    )


def _label(r: RejectedResult) -> str:
    return LABELS[r.analyte] if r.analyte else "Result"


def _implausible(rejected: Iterable[RejectedResult]) -> Finding | None:
    items = list(rejected)
    if not items:
        return None
    first = items[0]
    lead = f"{_label(first)} '{first.raw}'"
    if len(items) > 1:
        lead = f"{len(items)} results not used, including {lead}"
    else:
        lead += " not used"
    return Finding(
        code=FindingCode.IMPLAUSIBLE,
        urgency=Urgency.INFO,
        summary=shorten(f"{lead}: {first.reason}", 139),
        details=tuple(f"- {_label(r)} {r.raw} ({r.source_id}): {r.reason}" for r in items),
        inputs=tuple(
            InputUsed(
                label=_label(r),
                value=r.raw,
                unit="",
                time=r.time,
                source_id=r.source_id,
                note=r.reason,
            )
            for r in items
        ),
        next_steps=("Check the result with the laboratory and repeat the test if needed.",),
        cautions=(CAUTION,),
    )


def _relevant_rejections(ctx: ClinicalContext, others: list[Finding]) -> list[RejectedResult]:
    """All rejections when something else is reported; otherwise only those that might hide
    a low sodium (sodium or unknown analyte), so a normal chart stays quiet."""
    if others:
        return list(ctx.rejected)
    return [r for r in ctx.rejected if r.analyte in (None, Analyte.SODIUM)]


#: Advice that urges raising sodium: it must not stand beside a correction-rate card.
_RAISING = re.compile(
    r"urgent treatment|treat(ed)? urgently|raise (the )?(serum )?sodium|raising (serum )?sodium",
    re.IGNORECASE,
)
_FOLLOW_CORRECTION = (
    "Sodium has risen faster than the correction limit: the correction card leads; do not "
    "push sodium up now."
)


def _one_plan(f: Finding) -> Finding:
    """The finding without lines that urge raising sodium (the correction card leads)."""
    cautions = tuple(c for c in f.cautions if not _RAISING.search(c))
    steps = tuple(s for s in f.next_steps if not _RAISING.search(s))
    if (cautions, steps) == (f.cautions, f.next_steps):
        return f
    return replace(f, cautions=(*cautions, _FOLLOW_CORRECTION), next_steps=steps)


def _assemble(ctx: ClinicalContext, th: Thresholds, found: list[Finding]) -> list[Finding]:
    correction = correction_finding(ctx, th)
    if correction is not None:
        found = [correction, *(_one_plan(f) for f in found)]
    implausible = _implausible(_relevant_rejections(ctx, found))
    if implausible is not None:
        found.append(implausible)
    out: dict[FindingCode, Finding] = {}
    for f in found:
        out.setdefault(f.code, f)
    return sorted(out.values(), key=lambda f: _URGENCY_ORDER[f.urgency])


def evaluate_workup(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Patient-view findings: [] for a normal sodium without a correction problem."""
    gate = _out_of_scope(ctx, th)
    if gate is not None:
        return [gate]
    return _assemble(ctx, th, workup_findings(ctx, th))


def evaluate_orders(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Order-select / order-sign findings about the selected draft orders."""
    gate = _out_of_scope(ctx, th)
    if gate is not None:
        return [gate]
    return _assemble(ctx, th, order_findings(ctx, th))
