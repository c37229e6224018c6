"""`tonicity rehearse EXPORT_DIR --from DATE --to DATE [--config FILE] [--out DIR]
[--scheduler ADDRESS] [--workers N] [--cases FILE] [--resume]`.

Replays a FHIR Bulk Data export (NDJSON, optionally gzip-compressed) through the live
service's FHIR mapping, clinical core and alert policy, and writes the alert-burden report
(``rehearsal.html``, ``rehearsal.json``, CSV files) into ``--out``. Embedded on a process pool
by default; ``--scheduler ADDRESS`` runs the same tasks on a Dask distributed scheduler
(``--scheduler local``: a local cluster of ``--workers`` processes).
"""

from __future__ import annotations

import argparse
import os
import sys
from datetime import UTC, date, datetime, timedelta

from cds_service.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("export", metavar="EXPORT_DIR", help="folder of .ndjson / .ndjson.gz files")
    parser.add_argument(
        "--from",
        dest="start",
        metavar="DATE",
        required=True,
        help="first day (or ISO date-time) of the range, UTC",
    )
    parser.add_argument(
        "--to",
        dest="end",
        metavar="DATE",
        required=True,
        help="last day of the range, included (an ISO date-time: excluded)",
    )
    parser.add_argument(
        "--config",
        metavar="FILE",
        default=None,
        help="the live service's TOML configuration (thresholds, alert settings)",
    )
    parser.add_argument(
        "--out", metavar="DIR", default="rehearsal", help="output folder (default ./rehearsal)"
    )
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        default=None,
        help="Dask scheduler address (tcp://host:8786), or 'local'",
    )
    parser.add_argument(
        "--workers",
        metavar="N",
        type=int,
        default=None,
        help="worker processes (default: the machine's cores)",
    )
    parser.add_argument(
        "--cases",
        metavar="FILE",
        default=None,
        help="also write the cases for local chart review (holds patient ids)",
    )
    parser.add_argument(
        "--resume",
        action="store_true",
        help="finish an interrupted run in --out without redoing finished work",
    )
    parser.add_argument("--partitions", metavar="N", type=int, default=None, help=argparse.SUPPRESS)


def parse_bound(text: str, option: str, *, end: bool) -> datetime:
    """A date (start of that day; for ``--to`` the start of the next day) or a date-time."""
    try:
        if len(text) == 10:
            day = date.fromisoformat(text)
            moment = datetime(day.year, day.month, day.day, tzinfo=UTC)
            return moment + timedelta(days=1) if end else moment
        value = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise UserError(f"{option} {text!r} is not an ISO 8601 date or date-time") from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from cds_service.rehearsal import Options, rehearse

    workers = args.workers or os.cpu_count() or 1
    if args.partitions is not None and args.partitions < 1:
        raise UserError("--partitions must be at least 1")
    opts = Options(
        export_dir=args.export,
        start=parse_bound(args.start, "--from", end=False),
        end=parse_bound(args.end, "--to", end=True),
        out=args.out,
        config=args.config,
        scheduler=args.scheduler,
        workers=workers,
        partitions=args.partitions,
        cases=args.cases,
        resume=args.resume,
    )
    if args.config and not Path(args.config).is_file():
        raise UserError(f"cannot read config file {args.config}")
    report = rehearse(opts)
    out = Path(args.out)
    problems = report["input"]["problem_lines"]
    print(
        f"{report['population']['patients']:,} patients, {report['cards_total']['shown']:,} cards "
        f"shown ({report['cards_total']['cards_per_100_patient_days']} per 100 patient-days), "
        f"{len(report['breaches'])} correction-limit breaches; "
        + (
            f"{problems:,} input lines not read (see {out / 'input-problems.csv'}); "
            if problems
            else ""
        )
        + f"report: {out / 'rehearsal.html'}",
        file=sys.stdout,
    )
    if args.cases:
        print(f"cases for chart review (patient ids, keep local): {args.cases}", file=sys.stdout)
    return 0
