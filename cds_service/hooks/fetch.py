"""Fetch what the client did not prefetch, from its ``fhirServer``, with its bearer token.

All queries of one hook call run concurrently through the one shared ``httpx.AsyncClient``,
under one time budget; searchset pages are followed through their ``next`` links up to a bound,
only on the same server (the token must never travel elsewhere), and a link seen twice stops
the walk. The access token is used only in the ``Authorization`` header of these requests; it
is never logged, stored or put into an error message.
"""

from __future__ import annotations

import asyncio
import logging
import re
from dataclasses import dataclass, field
from typing import Any
from urllib.parse import urljoin

import httpx

from cds_service.hooks.models import strict_json

_log = logging.getLogger(__name__)


@dataclass(frozen=True, slots=True)
class FetchResult:
    """``data`` (resource, merged searchset Bundle or None) and/or ``error`` with its ``kind``."""

    data: dict[str, Any] | None = None
    error: str | None = None
    kind: str | None = None  # timeout | auth | http | network | invalid | not-found
    #: Only the first page(s) of a paged search arrived: ``data`` holds what did (``error``,
    #: when set, says why the rest did not).
    partial: bool = False


class FetchError(Exception):
    def __init__(self, kind: str, message: str) -> None:
        super().__init__(message)
        self.kind = kind


#: Largest FHIR response page read (bytes); a larger one is refused, not buffered.
MAX_PAGE_BYTES = 20_000_000


#: Percent-encoded ".", "/" and "\\" in a path: a server may decode them into dot segments or
#: separators after our check, so a URL carrying one is never sent the token.
_ENCODED_SEPARATORS = re.compile(r"%(2e|2f|5c)", re.IGNORECASE)


def _server_url(url: str) -> httpx.URL | None:
    """``url`` as httpx will send it: dot segments removed (RFC 3986 section 5.2.4, done by
    httpx's URL parser), or None when it carries an encoded dot, slash or backslash, a
    backslash, user info or anything that is not an http(s) URL."""
    try:
        parsed = httpx.URL(url)
    except (httpx.InvalidURL, TypeError, ValueError):
        return None
    raw_path = parsed.raw_path.split(b"?", 1)[0].decode("ascii", "replace")
    if (
        parsed.scheme not in ("http", "https")
        or not parsed.host
        or parsed.userinfo
        or "\\" in raw_path
        or _ENCODED_SEPARATORS.search(raw_path)
    ):
        return None
    return parsed


def _same_server(url: str, base: str) -> bool:
    """Is ``url`` on the FHIR server ``base`` (same scheme, host, port, under its path), as
    the request would actually be sent (see :func:`_server_url`)?"""
    u, b = _server_url(url), _server_url(base)
    if u is None or b is None:
        return False
    root = b.path.rstrip("/")
    return (u.scheme, u.host, u.port) == (b.scheme, b.host, b.port) and (
        u.path == root or u.path.startswith(root + "/")
    )


def _next_link(bundle: dict[str, Any]) -> str | None:
    for link in bundle.get("link") or []:
        if isinstance(link, dict) and link.get("relation") == "next" and link.get("url"):
            return str(link["url"])
    return None


async def _get(http: httpx.AsyncClient, url: str, headers: dict[str, str]) -> dict[str, Any]:
    try:
        async with http.stream("GET", url, headers=headers) as response:
            status = response.status_code
            raw = await _read_capped(response) if status == 200 else b""
    except httpx.TimeoutException:
        raise FetchError("timeout", "FHIR server did not answer in time") from None
    except httpx.HTTPError as exc:
        raise FetchError("network", f"FHIR server unreachable ({type(exc).__name__})") from None
    if status in (401, 403):
        raise FetchError("auth", f"FHIR server refused access ({status})")
    if status == 404:
        raise FetchError("not-found", "FHIR server has no such resource (404)")
    if status != 200:
        raise FetchError("http", f"FHIR server answered {status}")
    try:
        body = strict_json(raw)
    except ValueError:
        raise FetchError("invalid", "FHIR server sent something that is not JSON") from None
    if not isinstance(body, dict) or not isinstance(body.get("resourceType"), str):
        raise FetchError("invalid", "FHIR server sent JSON that is not a FHIR resource")
    if body["resourceType"] == "OperationOutcome":
        raise FetchError("http", "FHIR server answered with an OperationOutcome")
    return body


async def _read_capped(response: httpx.Response) -> bytes:
    chunks: list[bytes] = []
    size = 0
    async for chunk in response.aiter_bytes():
        size += len(chunk)
        if size > MAX_PAGE_BYTES:
            raise FetchError("invalid", f"FHIR response page larger than {MAX_PAGE_BYTES} bytes")
        chunks.append(chunk)
    return b"".join(chunks)


@dataclass(slots=True)
class _Walk:
    """A read or search in progress: what has arrived so far survives a timeout or a failing
    later page, and ``complete`` says whether every page was read."""

    first: dict[str, Any] | None = None
    entries: list[Any] = field(default_factory=list)
    complete: bool = False

    def merged(self) -> dict[str, Any] | None:
        if self.first is None or self.first.get("resourceType") != "Bundle":
            return self.first
        merged = {k: v for k, v in self.first.items() if k not in ("entry", "link")}
        merged["entry"] = list(self.entries)
        return merged


def _headers(token: str | None) -> dict[str, str]:
    headers = {"Accept": "application/fhir+json"}
    if token:
        headers["Authorization"] = f"Bearer {token}"
    return headers


async def _walk(
    http: httpx.AsyncClient,
    base: str,
    query: str,
    headers: dict[str, str],
    walk: _Walk,
    *,
    max_pages: int,
) -> None:
    """Read ``query`` (relative to ``base``) into ``walk``, or, when ``walk.first`` is already
    a Bundle (a prefetched first page), only the pages its ``next`` links lead to."""
    url = urljoin(base.rstrip("/") + "/", query)
    if walk.first is None:
        if not _same_server(url, base):  # a query is relative: it must stay under fhirServer
            raise FetchError("invalid", "query does not stay on the FHIR server; not sent")
        walk.first = await _get(http, url, headers)
        if walk.first["resourceType"] != "Bundle":
            walk.complete = True
            return
    walk.entries.extend(walk.first.get("entry") or [])
    seen = {url}
    pages = 1
    next_url = _next_link(walk.first)
    while next_url:
        next_url = urljoin(url, next_url)
        if pages >= max_pages:
            _log.warning("fhir fetch: stopped at fhir.max_pages (%d pages)", pages)
            return
        if next_url in seen:
            _log.warning("fhir fetch: next link loops back; stopped after %d pages", pages)
            return
        if not _same_server(next_url, base):
            _log.warning("fhir fetch: next link leaves the FHIR server; not followed")
            return
        seen.add(next_url)
        page = await _get(http, next_url, headers)
        walk.entries.extend(page.get("entry") or [])
        pages += 1
        next_url = _next_link(page) if page["resourceType"] == "Bundle" else None
    walk.complete = True


async def fetch_query(
    http: httpx.AsyncClient,
    base: str,
    query: str,
    token: str | None,
    *,
    max_pages: int,
) -> dict[str, Any]:
    """One read or search against ``base``; searchset pages merged into one Bundle."""
    walk = _Walk()
    await _walk(http, base, query, _headers(token), walk, max_pages=max_pages)
    merged = walk.merged()
    assert merged is not None
    return merged


def has_next(bundle: object) -> bool:
    """Is ``bundle`` a Bundle page with a ``next`` link (more results on the server)?"""
    return (
        isinstance(bundle, dict)
        and bundle.get("resourceType") == "Bundle"
        and _next_link(bundle) is not None
    )


async def fetch_all(
    http: httpx.AsyncClient,
    base: str,
    queries: dict[str, str],
    token: str | None,
    *,
    budget_seconds: float,
    max_pages: int,
    continued: dict[str, dict[str, Any]] | None = None,
) -> dict[str, FetchResult]:
    """Run every query concurrently, and follow the ``next`` links of the ``continued`` first
    pages (prefetched Bundles, by key), under one time budget. A key whose later pages could
    not all be read (budget, ``max_pages``, a failing page, a link off the server) keeps what
    arrived, with ``partial`` set; a key of which nothing arrived is an error."""
    walks = {key: _Walk() for key in queries}
    walks.update({key: _Walk(first=page) for key, page in (continued or {}).items()})
    if not walks:
        return {}
    headers = _headers(token)
    tasks = {
        key: asyncio.create_task(
            _walk(http, base, queries.get(key, ""), headers, walk, max_pages=max_pages)
        )
        for key, walk in walks.items()
    }
    done, pending = await asyncio.wait(tasks.values(), timeout=budget_seconds)
    for task in pending:
        task.cancel()
    if pending:
        await asyncio.gather(*pending, return_exceptions=True)
    results: dict[str, FetchResult] = {}
    for key, task in tasks.items():
        walk = walks[key]
        exc = None if task not in done else task.exception()
        if task not in done:
            error, kind = "FHIR fetch exceeded the time budget", "timeout"
        elif exc is None:
            results[key] = FetchResult(data=walk.merged(), partial=not walk.complete)
            continue
        elif isinstance(exc, FetchError):
            error, kind = str(exc), exc.kind
        else:
            _log.error("fhir fetch failed unexpectedly: %s", type(exc).__name__)
            error, kind = "FHIR fetch failed", "internal"
        if walk.first is not None and walk.first.get("resourceType") == "Bundle":
            results[key] = FetchResult(data=walk.merged(), error=error, kind=kind, partial=True)
        else:
            results[key] = FetchResult(error=error, kind=kind)
    return results
