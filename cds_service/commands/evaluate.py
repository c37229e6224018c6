"""`tonicity evaluate PATH [--hook HOOK] [--draft-orders PATH] [--now ISO] [--config FILE]`.

Prints, as JSON on stdout, exactly the response body the service would return. PATH is a CDS
Hooks request (it has ``hook``) or a FHIR Bundle of one patient's record; for a Bundle the
command acts as the CDS client and fills the service's own prefetch templates from it. For
order hooks every draft order in ``--draft-orders`` counts as selected. Nothing is stored and
no network is used: what the request does not carry is "not available".
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
from typing import Any

from cds_service.commands._inputs import parse_now, read_json_file
from cds_service.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("path", metavar="PATH", help="CDS Hooks request or patient FHIR Bundle")
    parser.add_argument(
        "--hook",
        default=None,
        help="hook to play for a Bundle: patient-view (default), order-select, order-sign",
    )
    parser.add_argument(
        "--draft-orders",
        metavar="PATH",
        default=None,
        help="draft orders (Bundle, JSON list or one resource) for order hooks; all selected",
    )
    parser.add_argument(
        "--now", metavar="ISO", default=None, help="evaluation time, ISO 8601 (default: now)"
    )
    parser.add_argument("--config", metavar="FILE", default=None, help="TOML configuration")


def build_body(args: argparse.Namespace) -> dict[str, Any]:
    from cds_service.hooks.client import build_request, draft_resources

    data = read_json_file(args.path, "input")
    if not isinstance(data, dict):
        raise UserError(f"{args.path} is neither a CDS Hooks request nor a FHIR Bundle")
    if "hook" in data:
        if args.draft_orders:
            raise UserError("--draft-orders applies to a Bundle; a request carries its own")
        if args.hook and args.hook != data["hook"]:
            raise UserError(f"--hook {args.hook} differs from the request's hook {data['hook']!r}")
        return data
    if data.get("resourceType") != "Bundle":
        raise UserError(f"{args.path} is neither a CDS Hooks request nor a FHIR Bundle")
    drafts = None
    if args.draft_orders:
        drafts = draft_resources(read_json_file(args.draft_orders, "draft orders"))
    return build_request(data, args.hook or "patient-view", drafts)


def run(args: argparse.Namespace) -> int:
    from cds_service.clinical.thresholds import load_thresholds
    from cds_service.config import load_settings
    from cds_service.hooks.service import HookError, evaluate

    settings = load_settings(args.config)
    now = parse_now(args.now)
    body = build_body(args)
    try:
        thresholds = load_thresholds(settings.clinical)
    except ValueError as exc:
        raise UserError(f"invalid clinical thresholds in the configuration: {exc}") from None
    try:
        outcome = asyncio.run(evaluate(body, settings=settings, thresholds=thresholds, now=now))
    except HookError as exc:
        raise UserError(f"{exc.status}: {exc.message}") from None
    except Exception as exc:  # never a traceback: say what failed, in one line
        raise UserError(
            f"could not evaluate {args.path} ({type(exc).__name__}: {exc})".replace("\n", " ")
        ) from None
    json.dump(outcome.response, sys.stdout, indent=2, ensure_ascii=False)
    sys.stdout.write("\n")
    if outcome.no_cards:  # stdout stays exactly the response body
        sys.stderr.write(f"tonicity evaluate: no cards: {outcome.no_cards}\n")
    return 0
