"""`tonicity inspect BUNDLE [--json]`: what Tonicity understood of every resource.

BUNDLE is a FHIR Bundle (or single resource, or a JSON list of them) or a CDS Hooks request
(its prefetch values and context.draftOrders are read). The table shows, per resource, what it
was understood as (analyte, canonical value and unit, time) and whether it was used, or
ignored and why: this is how an integrator finds LOINC and unit mapping problems.
"""

from __future__ import annotations

import argparse
import json
from typing import Any

from cds_service.commands._inputs import parse_now, read_json_file
from cds_service.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("bundle", metavar="BUNDLE", help="FHIR Bundle or CDS Hooks request (JSON)")
    parser.add_argument("--json", action="store_true", help="print the report as JSON")
    parser.add_argument("--now", help="evaluation time, ISO 8601 (default: now)")
    parser.add_argument("--patient", help="patient id (default: from the request or Bundle)")
    parser.add_argument("--config", help="configuration file (for [ingest] settings)")


def split_input(data: Any) -> tuple[list[Any], list[Any], str | None, list[str]]:
    """(resources, draft orders, patient id, selections) from a request, Bundle or list."""
    if isinstance(data, list):
        return data, [], None, []
    if not isinstance(data, dict):
        raise UserError("input is neither a FHIR resource nor a CDS Hooks request")
    if "hook" in data:
        prefetch = data.get("prefetch")
        context = data.get("context") if isinstance(data.get("context"), dict) else {}
        resources = list(prefetch.values()) if isinstance(prefetch, dict) else []
        drafts = context.get("draftOrders")
        pid = context.get("patientId")
        selections = context.get("selections")
        return (
            resources,
            [drafts] if drafts is not None else [],
            pid if isinstance(pid, str) else None,
            [s for s in selections if isinstance(s, str)] if isinstance(selections, list) else [],
        )
    if "resourceType" not in data:
        raise UserError("input has no resourceType and no hook: not FHIR, not CDS Hooks")
    return [data], [], None, []


def _format_value(line: Any) -> str:
    if line.value is None:
        return line.raw or ""
    shown = f"{line.value:g} {line.unit}"
    return shown + (f"  (sent {line.raw})" if line.raw and line.raw != shown else "")


def table(report: Any) -> str:
    rows = [("RESOURCE", "UNDERSTOOD AS", "VALUE", "TIME", "USED", "WHY / NOTE")]
    for line in report.lines:
        rows.append(
            (
                line.resource,
                line.understood_as,
                _format_value(line),
                line.time.strftime("%Y-%m-%d %H:%M") if line.time else "",
                "used" if line.used else "ignored",
                line.reason,
            )
        )
    # the resource key is never cut (integrators search for it); long labels are
    widths = [
        max(len(r[i]) for r in rows) if i == 0 else min(max(len(r[i]) for r in rows), 48)
        for i in range(5)
    ]
    out = []
    for row in rows:
        cells = [row[i][: widths[i]].ljust(widths[i]) for i in range(5)]
        out.append("  ".join([*cells, row[5]]).rstrip())
    used = sum(1 for line in report.lines if line.used)
    out.append(f"\n{used} used, {len(report.lines) - used} ignored")
    return "\n".join(out)


def in_use(ctx: Any) -> dict[str, dict[str, Any]]:
    """Per analyte, the result the work-up uses at ``ctx.now`` (the latest within its
    lookback, glucose and urea paired with the sodium draw): what ``evaluate`` computes with."""
    return {
        str(analyte): {
            "resource": r.source_id,
            "value": r.value,
            "unit": r.unit,
            "time": r.time.isoformat(),
        }
        for analyte, r in sorted(ctx.current.items())
    }


def run(args: argparse.Namespace) -> int:
    from cds_service.clinical.thresholds import load_thresholds
    from cds_service.config import load_settings
    from cds_service.fhir import build_context
    from cds_service.hooks.service import no_cards_reason

    resources, drafts, pid, selections = split_input(read_json_file(args.bundle))
    settings = load_settings(args.config)
    result = build_context(
        resources,
        now=parse_now(args.now),
        settings=settings.ingest,
        patient_id=args.patient or pid,
        draft_orders=drafts,
        selections=selections,
    )
    ctx = result.context
    current = in_use(ctx)
    note = None
    if "sodium" not in current:
        try:
            note = no_cards_reason(ctx, settings, load_thresholds(settings.clinical))
        except ValueError as exc:
            raise UserError(f"invalid clinical thresholds in the configuration: {exc}") from None
    if args.json:
        out = {**result.report.to_dict(), "now": ctx.now.isoformat(), "in_use": current}
        if note:
            out["no_sodium"] = note
        print(json.dumps(out, indent=2))
    else:
        print(table(result.report))
        print(f"\nIn use at {ctx.now:%Y-%m-%d %H:%M %Z} (latest within each lookback):")
        for analyte, r in current.items():
            print(f"  {analyte}: {r['value']:g} {r['unit']}  {r['resource']}")
        if note:
            print(f"  no sodium in use: {note}")
    return 0
