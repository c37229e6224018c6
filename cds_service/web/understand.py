"""The workbench's view of a hook request: the record as Tonicity read it.

For the request the workbench is about to send (or has sent), this returns what the FHIR
layer understood of every prefetched resource (used, or ignored and why: the same report as
``tonicity inspect``), the patient facts it found, and, per finding, the results the finding
rests on, so the page can place each card beside its results. Only the prefetch the request
carries is read: nothing is fetched from a FHIR server, nothing is stored or logged.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from cds_service.clinical.context import ClinicalContext
from cds_service.clinical.notes import LABELS
from cds_service.hooks.cards import one_per_code
from cds_service.hooks.service import (
    findings_for,
    gather_data,
    no_cards_reason,
    parse_call,
    read_call,
)


def _patient(ctx: ClinicalContext) -> dict[str, Any]:
    p = ctx.patient
    return {
        "age_years": None if p.age_years is None else int(p.age_years),
        "sex": str(p.sex),
        "known": p.known,
    }


async def understand(
    body: object, *, settings: Any, thresholds: Any, now: datetime
) -> dict[str, Any]:
    """What the workbench shows beside the cards (raises HookError for a bad request)."""
    call = parse_call(body)
    state = await gather_data(call, settings)  # prefetch only: no client, nothing fetched
    ingested = read_call(call, state, settings, now, report_lines=True)
    ctx = ingested.context
    findings = findings_for(call, ctx, thresholds)
    labels = {str(a): text for a, text in LABELS.items()}
    results = []
    for line in ingested.report.lines:
        row = line.to_dict()
        row["label"] = labels.get(line.analyte or "", line.understood_as)
        results.append(row)
    return {
        "now": now.isoformat(),
        "hook": call.service.hook,
        "patient": _patient(ctx),
        "results": results,
        "findings": {
            str(f.code): sorted({i.source_id for i in f.inputs if i.source_id})
            for f in one_per_code(findings)
        },
        "unavailable": dict(sorted(state.unavailable.items())),
        **(
            {"reason": reason}
            if not findings and (reason := no_cards_reason(ctx, settings, thresholds))
            else {}
        ),
    }
