"""Structured JSON logs with a request id, salted patient hashes, and one audit line per call.

One JSON object per line: ``time`` (UTC, ISO 8601), ``level``, ``logger``, ``event`` (the
message), ``request_id`` (from a context variable, so every line of one request shares it),
then the structured fields passed as ``extra={"fields": {...}}`` or through ``log_event``.

What never reaches a log: bearer tokens (FHIR access tokens or client JWTs), lab values,
names, raw patient ids (only ``hash_patient_id``), trend-link tokens. The formatter also masks
anything shaped like a JWT, a ``Bearer`` credential or a ``/trend/<token>`` path, as a second
line of defence; exception messages are left out (they may quote input), only the type and the
stack frames (file, line, function; no source text) are written.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import re
import sys
import traceback
import uuid
from collections.abc import Iterable
from contextvars import ContextVar, Token
from datetime import UTC, datetime
from typing import Any

from cds_service.config import Settings
from cds_service.errors import UserError

AUDIT_LOGGER = "tonicity.audit"
_LEVELS = ("DEBUG", "INFO", "WARNING", "ERROR", "CRITICAL")
DEFAULT_SALT = "change-me-in-production"  # the shipped default of logging.patient_id_salt

_request_id: ContextVar[str | None] = ContextVar("tonicity_request_id", default=None)
_REQUEST_ID_SHAPE = re.compile(r"^[A-Za-z0-9._-]{1,64}$")
_HASH_SHAPE = re.compile(r"^[0-9a-f]{32}$")
_SECRETS = (
    (re.compile(r"eyJ[A-Za-z0-9_-]*\.[A-Za-z0-9_-]+\.[A-Za-z0-9_-]*"), "[redacted-jwt]"),
    (re.compile(r"(?i)(bearer\s+)[A-Za-z0-9._~+/=-]+"), r"\1[redacted]"),
    (re.compile(r"(/trend/)[A-Za-z0-9_-]+"), r"\1[redacted]"),
)


def get_request_id() -> str | None:
    return _request_id.get()


def set_request_id(incoming: str | None = None) -> tuple[str, Token[str | None]]:
    """Start a request: keep a well-formed incoming id (e.g. ``X-Request-ID``), else make one.

    Returns the id and a token for ``reset_request_id`` when the request ends.
    """
    rid = incoming if incoming and _REQUEST_ID_SHAPE.match(incoming) else uuid.uuid4().hex
    return rid, _request_id.set(rid)


def reset_request_id(token: Token[str | None]) -> None:
    _request_id.reset(token)


def scrub(text: str) -> str:
    """Mask credentials and capability tokens in a log line."""
    for pattern, replacement in _SECRETS:
        text = pattern.sub(replacement, text)
    return text


class JsonFormatter(logging.Formatter):
    """One JSON object per record."""

    def format(self, record: logging.LogRecord) -> str:
        data: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "event": record.getMessage(),
            "request_id": get_request_id(),
        }
        fields = getattr(record, "fields", None)
        if isinstance(fields, dict):
            for key, value in fields.items():
                data.setdefault(str(key), value)
        if record.exc_info and record.exc_info[0] is not None:
            data["exception"] = record.exc_info[0].__name__
            data["stack"] = [
                f"{frame.filename}:{frame.lineno} in {frame.name}"
                for frame in traceback.extract_tb(record.exc_info[2])
            ]
        return scrub(json.dumps(data, default=str, ensure_ascii=False))


class TextFormatter(logging.Formatter):
    """One readable line per record for a person at a terminal: time, level, logger, event,
    then the structured fields as ``key=value`` (masked as in the JSON lines)."""

    def format(self, record: logging.LogRecord) -> str:
        when = datetime.fromtimestamp(record.created, UTC).strftime("%H:%M:%S")
        parts = [f"{when} {record.levelname:<7} {record.name}: {record.getMessage()}"]
        fields = getattr(record, "fields", None)
        if isinstance(fields, dict):
            parts += [f"{k}={v}" for k, v in fields.items()]
        rid = get_request_id()
        if rid:
            parts.append(f"request_id={rid}")
        if record.exc_info and record.exc_info[0] is not None:
            frame = traceback.extract_tb(record.exc_info[2])[-1:]
            where = f" at {frame[0].filename}:{frame[0].lineno}" if frame else ""
            parts.append(f"exception={record.exc_info[0].__name__}{where}")
        return scrub(" ".join(parts))


def configure_logging(settings: Settings) -> None:
    """Send every log record (ours, uvicorn's, libraries') to stderr: JSON lines, or text
    lines when ``logging.format`` says so (``auto``: text on a terminal)."""
    level = settings.logging.level.upper()
    if level not in _LEVELS:
        raise UserError(
            f"logging.level {settings.logging.level!r} is not one of {', '.join(_LEVELS)}"
        )
    handler = logging.StreamHandler(sys.stderr)
    fmt = getattr(settings.logging, "format", "json")
    text = fmt == "text" or (fmt == "auto" and sys.stderr.isatty())
    handler.setFormatter(TextFormatter() if text else JsonFormatter())
    root = logging.getLogger()
    for old in list(root.handlers):
        root.removeHandler(old)
    root.addHandler(handler)
    root.setLevel(level)
    for name in ("uvicorn", "uvicorn.error", "uvicorn.access"):
        lib = logging.getLogger(name)
        lib.handlers.clear()
        lib.propagate = True
        lib.disabled = False  # an earlier logging.config.dictConfig may have disabled it
        lib.setLevel(logging.NOTSET)  # follow the configured root level, not uvicorn's own
    # httpx logs each request URL with its query at INFO: FHIR queries carry patient ids.
    logging.getLogger("httpx").setLevel(logging.WARNING)
    logging.getLogger("alembic").setLevel(logging.WARNING)  # its per-start notes say nothing
    if settings.logging.patient_id_salt == DEFAULT_SALT and settings.auth.required:
        log_event(
            logging.getLogger("tonicity"),
            "logging.patient_id_salt is the shipped default: set a secret salt",
            level=logging.WARNING,
        )


def log_event(logger: logging.Logger, event: str, level: int = logging.INFO, **fields: Any) -> None:
    """Log ``event`` with structured ``fields`` (which must hold no PHI or secret)."""
    logger.log(level, event, extra={"fields": fields})


def hash_patient_id(salt: str, pid: str) -> str:
    """HMAC-SHA256 of the patient id under a secret salt, hex, first 32 characters.

    The same patient gives the same hash under one salt (so audit lines can be joined), and
    without the salt the id cannot be recovered by trying candidate ids.
    """
    if not salt:
        raise ValueError("patient id salt must not be empty")
    return hmac.new(salt.encode(), pid.encode(), hashlib.sha256).hexdigest()[:32]


def audit(
    client: str | None,
    service: str,
    finding_codes: Iterable[str],
    latency_ms: float,
    status: int,
    patient_hash: str | None,
) -> None:
    """The audit line of one hook call: who called which service, what it said, how fast.

    ``patient_hash`` must come from ``hash_patient_id``; anything else is not written.
    """
    if patient_hash is not None and not _HASH_SHAPE.match(patient_hash):
        patient_hash = "[not-a-hash]"
    log_event(
        logging.getLogger(AUDIT_LOGGER),
        "hook call",
        audit=True,
        client=client or "anonymous",
        service=service,
        finding_codes=sorted(set(finding_codes)),
        latency_ms=round(float(latency_ms), 1),
        status=int(status),
        patient_hash=patient_hash,
    )
