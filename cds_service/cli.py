"""``tonicity`` command line (DESIGN.md contract): serve, evaluate, inspect, replay, keys,
feedback-report, db, knowledge. Each subcommand lives in ``cds_service.commands.<name>`` with
``add_arguments(parser)`` and ``run(args) -> int``; heavy imports happen inside ``run``.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from typing import NoReturn

from cds_service.errors import UserError

COMMANDS: dict[str, tuple[str, str]] = {
    "serve": ("serve", "run the CDS Hooks service"),
    "evaluate": ("evaluate", "print the response the service would give for a request or Bundle"),
    "inspect": ("inspect", "show what Tonicity understood of each resource in a Bundle"),
    "replay": ("replay", "post the sample requests to a running deployment and check them"),
    "keys": ("keys", "generate a client key pair and JWKS, or sign a test token"),
    "feedback-report": ("feedback_report", "acceptance and override rates per finding code"),
    "db": ("db", "upgrade the database schema, or show its revision"),
    "knowledge": ("knowledge", "every threshold, drug class, infusate and code with its source"),
    "rehearse": ("rehearse", "replay a Bulk Data export: alert burden and missed overcorrections"),
}


class _Parser(argparse.ArgumentParser):
    """Argument errors in one line (the rule for every user error), with where to look."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="tonicity",
        description="Tonicity: hyponatremia work-up and sodium order safety as CDS Hooks.",
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, (module_name, help_text) in COMMANDS.items():
        module = importlib.import_module(f"cds_service.commands.{module_name}")
        p = sub.add_parser(name, help=help_text, description=help_text)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args._run(args) or 0)
    except UserError as exc:
        print(f"tonicity {args.command}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
