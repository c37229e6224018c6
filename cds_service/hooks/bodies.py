"""Request bodies of the service's POST endpoints: media type, size, JSON.

- Media type: ``application/json`` or ``application/fhir+json`` only (parameters such as
  ``charset`` allowed), else 415. A browser page on any origin may send a "simple" cross-origin
  POST (``text/plain``, form types) without a CORS preflight; refusing those types means every
  cross-origin call must first pass the preflight, and cannot reach the service unasked.
- Size: at most ``limit`` bytes, declared (``Content-Length``) or streamed, else 413.
- JSON: strict RFC 8259 (:func:`cds_service.hooks.models.strict_json`), else 400.

Each refusal is a :class:`cds_service.hooks.service.HookError` or :class:`BodyTooLarge`,
answered by the app with an OperationOutcome.
"""

from __future__ import annotations

from typing import Any

from starlette.requests import Request

from cds_service.hooks.models import strict_json
from cds_service.hooks.service import HookError

JSON_MEDIA_TYPES = frozenset({"application/json", "application/fhir+json"})
#: Caller-chosen text (ids, names) quoted in an error message is cut to this many characters.
ECHO_LIMIT = 64


class BodyTooLarge(Exception):
    """The body is over the limit: 413."""


def echo(value: object, limit: int = ECHO_LIMIT) -> str:
    """``repr`` of caller-sent text for an error message, at most ``limit`` characters of it."""
    text = str(value)
    return repr(text) if len(text) <= limit else f"{text[:limit]!r} (cut at {limit} characters)"


def require_json_media_type(request: Request) -> None:
    """415 unless the request says its body is JSON (see module doc)."""
    declared = request.headers.get("content-type", "")
    media_type = declared.split(";", 1)[0].strip().lower()
    if media_type not in JSON_MEDIA_TYPES:
        shown = echo(media_type) if media_type else "none"
        raise HookError(
            415,
            f"Content-Type {shown} is not accepted; send application/json or application/fhir+json",
        )


def declared_length(request: Request) -> int | None:
    declared = request.headers.get("content-length")
    if declared is None:
        return None
    try:
        return int(declared)
    except ValueError:
        raise HookError(400, "Content-Length is not a number") from None


async def read_body(request: Request, limit: int) -> bytes:
    """The request body, refusing more than ``limit`` bytes (declared or streamed)."""
    declared = declared_length(request)
    if declared is not None and declared > limit:
        raise BodyTooLarge
    chunks: list[bytes] = []
    size = 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise BodyTooLarge
        chunks.append(chunk)
    return b"".join(chunks)


def parse_body(raw: bytes) -> Any:
    """A body read by :func:`read_body` as JSON (CPU work: off the event loop for hook calls)."""
    if not raw.strip():
        raise HookError(400, "the request body is empty; a JSON object is required")
    try:
        return strict_json(raw)
    except ValueError as exc:
        raise HookError(400, f"the request body is not valid JSON ({exc})") from None


async def read_json(request: Request, limit: int) -> Any:
    """The request body as JSON: media type, size and syntax checked (see module doc)."""
    require_json_media_type(request)
    return parse_body(await read_body(request, limit))
