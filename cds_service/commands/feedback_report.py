"""`tonicity feedback-report [--config FILE] [--json | --csv] [--since D] [--until D]
[--service ID] [--include-replay]`: per finding code, and per finding code and week, findings
evaluated, shown, suppressed and silent, and acceptance and override rates with the reasons
chosen, from the configured store (the same figures as the quality page, ``/quality``)."""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", help="TOML configuration (storage.url)")
    form = parser.add_mutually_exclusive_group()
    form.add_argument("--json", action="store_true", help="print JSON instead of a table")
    form.add_argument("--csv", action="store_true", help="print CSV, one row per week and code")
    parser.add_argument("--since", metavar="DATE", help="cards evaluated from this day (UTC)")
    parser.add_argument("--until", metavar="DATE", help="cards evaluated before this day (UTC)")
    parser.add_argument("--service", metavar="ID", help="one service id (default: all)")
    parser.add_argument(
        "--include-replay", action="store_true", help="count calls made by `tonicity replay`"
    )


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from sqlalchemy import make_url
    from sqlalchemy.exc import ArgumentError, SQLAlchemyError

    from cds_service.config import load_settings
    from cds_service.errors import UserError
    from cds_service.store import Store
    from cds_service.store.feedback import feedback_report
    from cds_service.store.report import parse_filter

    report_filter = parse_filter(args.since, args.until, args.service, args.include_replay)
    settings = load_settings(args.config)
    try:
        url = make_url(settings.storage.url)
    except ArgumentError:
        raise UserError("storage.url is not a database URL") from None
    if url.get_backend_name() == "sqlite" and url.database and url.database != ":memory:":
        if not Path(url.database).exists():  # do not create an empty store just to report on it
            raise UserError(f"no store at {url.database} (set storage.url or run from its folder)")
    try:
        store = Store(settings.storage.url)
    except (ValueError, SQLAlchemyError) as exc:
        raise UserError(f"cannot open store: {type(exc).__name__}") from None
    try:
        report = feedback_report(store, report_filter)
    except SQLAlchemyError as exc:
        raise UserError(f"cannot read store {store.safe_url}: {type(exc).__name__}") from None
    finally:
        store.close()
    if args.json:
        print(report.to_json())
    elif args.csv:
        print(report.to_csv(), end="")
    else:
        print(f"Store: {store.safe_url}\n\n{report.to_text()}")
    return 0
