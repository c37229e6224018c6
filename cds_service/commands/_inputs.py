"""What every command reads the same way: a JSON file and an ``--now`` time.

Both fail with a one-line :class:`UserError` naming the file or value, never a traceback.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from cds_service.errors import UserError


def read_json_file(path: str | Path, what: str = "") -> Any:
    """The JSON document in ``path``, read strictly (no NaN or Infinity, bounded nesting).

    ``what`` names the file in messages, e.g. ``"draft orders"``.
    """
    from cds_service.hooks.models import strict_json

    label = f"{what} {path}" if what else str(path)
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise UserError(f"cannot read {label}: {exc.strerror or exc}") from None
    try:
        return strict_json(raw)
    except ValueError as exc:  # also UnicodeDecodeError and JSONDecodeError
        raise UserError(f"{label} is not valid JSON: {exc}") from None


def parse_now(text: str | None) -> datetime:
    """``--now`` as an aware time (UTC when no zone is given); the current time when absent."""
    if not text:
        return datetime.now(UTC)
    try:
        value = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise UserError(f"--now {text!r} is not an ISO 8601 date-time") from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)
