"""Routes of the web pages: the workbench at ``/``, its assets and samples, the trend pages.

Nothing here touches the CDS Hooks endpoints: the workbench page calls them from the browser
like any other client would, with ``fetch``.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, Response
from markupsafe import Markup
from pydantic import BaseModel, Field, ValidationError
from starlette.concurrency import run_in_threadpool

from cds_service.clinical.findings import FindingCode
from cds_service.hooks import bodies, snapshots
from cds_service.hooks.service import HookError
from cds_service.web import findings, pages, quality, samples, trend
from cds_service.web.markdown import render_markdown

STATIC_DIR = Path(__file__).parent / "static"
_MEDIA = {
    ".css": "text/css; charset=utf-8",
    ".js": "text/javascript; charset=utf-8",
    ".svg": "image/svg+xml",
    ".png": "image/png",
}

#: Service ids of DESIGN.md, with their hooks (the workbench's service picker).
SERVICES = (
    ("sodium-workup", "patient-view"),
    ("sodium-order-select", "order-select"),
    ("sodium-order-sign", "order-sign"),
)

_CSP = (
    "default-src 'none'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data:; connect-src 'self'; form-action 'self'; base-uri 'none'"
)
#: No page may be framed by another site (clickjacking), unless an institution names the
#: origins that embed its trend pages (``server.trend_frame_ancestors``).
_PAGE_HEADERS = {
    "Content-Security-Policy": f"{_CSP}; frame-ancestors 'none'",
    "X-Frame-Options": "DENY",  # for browsers without CSP level 2
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",  # a trend token must never leak through a Referer
}
_TREND_HEADERS = {**_PAGE_HEADERS, "Cache-Control": "no-store", "X-Robots-Tag": "noindex"}


def _trend_headers(request: Request) -> dict[str, str]:
    """The trend page's headers: framed only by the configured origins (X-Frame-Options
    cannot name an origin, so it is left out then; the CSP says who may frame)."""
    settings = _settings(request)
    ancestors = settings.server.trend_frame_ancestors if settings is not None else []
    if not ancestors:
        return _TREND_HEADERS
    headers = {k: v for k, v in _TREND_HEADERS.items() if k != "X-Frame-Options"}
    headers["Content-Security-Policy"] = f"{_CSP}; frame-ancestors {' '.join(ancestors)}"
    return headers


class RenderBody(BaseModel):
    texts: list[str] = Field(default_factory=list, max_length=200)


def _settings(request: Request) -> Any:
    return getattr(request.app.state, "settings", None)


def _auth_off(request: Request) -> bool:
    s = _settings(request)
    if s is None:
        return True
    return bool(getattr(s, "local_trial", False)) or not bool(s.auth.required)


#: Default body limit when the app has no settings (the routes mounted alone, in tests).
_DEFAULT_MAX_BODY = 5_000_000


async def _workbench_body(request: Request) -> Any:
    """The JSON body of a workbench POST, or the refusal to answer with.

    These endpoints serve a local trial: when authentication is required they are off (403),
    since a page cannot prove a verified caller without spending a client's one-time token
    on each call. Otherwise the body obeys the hook endpoints' rules: JSON media type (415),
    ``server.max_body_bytes`` (413), strict JSON (400).
    """
    if not _auth_off(request):
        return _problem(
            403,
            "the workbench's request builder and renderer are off while authentication is "
            "required; use `tonicity evaluate` or a local trial",
        )
    settings = _settings(request)
    limit = settings.server.max_body_bytes if settings is not None else _DEFAULT_MAX_BODY
    try:
        return await bodies.read_json(request, limit)
    except bodies.BodyTooLarge:
        return _problem(413, f"the request body is larger than {limit} bytes")
    except HookError as exc:
        return _problem(exc.status, exc.message)


def _sample_dir(request: Request) -> Path:
    return Path(getattr(request.app.state, "sample_dir", None) or samples.DEFAULT_SAMPLE_DIR)


def _plain(request: Request, status: int, heading: str, message: str) -> HTMLResponse:
    html = pages.render("plain.html", heading=heading, message=message)
    return HTMLResponse(html, status_code=status, headers=_trend_headers(request))


_PROBLEM_CODES = {403: "forbidden", 404: "not-found", 413: "too-costly", 415: "not-supported"}


def _problem(status: int, message: str) -> JSONResponse:
    """A FHIR OperationOutcome, as every other 4xx of the service."""
    code = _PROBLEM_CODES.get(status, "invalid")
    body = {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": code, "diagnostics": message}],
    }
    return JSONResponse(body, status_code=status)


def create_router() -> APIRouter:
    router = APIRouter(include_in_schema=False)
    router.include_router(quality.create_router())  # /quality (alert burden, feedback)

    @router.get("/", response_class=HTMLResponse)
    def workbench(request: Request) -> HTMLResponse:
        html = pages.render("workbench.html", auth_off=_auth_off(request), services=SERVICES)
        return HTMLResponse(html, headers=_PAGE_HEADERS)

    @router.get("/static/{name}")
    def static(name: str) -> Response:
        allowed = {p.name: p for p in STATIC_DIR.iterdir() if p.is_file()}
        path = allowed.get(name)
        if path is None:
            return _problem(404, f"no static file {name!r}")
        return FileResponse(
            path,
            media_type=_MEDIA.get(path.suffix, "application/octet-stream"),
            headers={"Cache-Control": "no-cache"},
        )

    @router.get("/workbench/samples")
    def sample_list(request: Request) -> JSONResponse:
        found = samples.list_samples(_sample_dir(request))
        return JSONResponse({"samples": [s.as_json() for s in found]})

    @router.get("/workbench/samples/{name:path}")
    def sample_file(name: str, request: Request) -> Response:
        try:
            _, path = samples.find_sample(_sample_dir(request), name)
        except samples.SampleNotFound:
            return _problem(404, "no such sample")
        return FileResponse(path, media_type="application/json")

    @router.get("/workbench/request/{name:path}")
    def sample_request(
        name: str, request: Request, hook: str | None = None, shift: bool = True
    ) -> Response:
        return _sample_request(request, name, hook, shift)

    @router.post("/workbench/request")
    async def bundle_request(request: Request, hook: str = "patient-view") -> Response:
        """A pasted or uploaded patient Bundle turned into the hook request a client sends."""
        record = await _workbench_body(request)
        if isinstance(record, Response):
            return record
        return await run_in_threadpool(_build, record, hook)

    @router.post("/workbench/understand")
    async def understand_request(request: Request) -> Response:
        """The record as Tonicity read it, for the request the page sends (see understand)."""
        from cds_service.clinical.thresholds import load_thresholds
        from cds_service.web.understand import understand

        record = await _workbench_body(request)
        if isinstance(record, Response):
            return record
        settings = _settings(request)
        thresholds = getattr(request.app.state, "thresholds", None) or load_thresholds()
        try:
            body = await understand(
                record, settings=settings, thresholds=thresholds, now=datetime.now(UTC)
            )
        except HookError as exc:
            return _problem(exc.status if 400 <= exc.status < 500 else 400, exc.message)
        return JSONResponse(body)

    @router.post("/workbench/render")
    async def render(request: Request) -> Response:
        payload = await _workbench_body(request)
        if isinstance(payload, Response):
            return payload
        try:
            body = RenderBody.model_validate(payload)
        except ValidationError:
            return _problem(400, 'expected {"texts": [markdown text, ...]} (at most 200)')
        if sum(len(t) for t in body.texts) > 500_000:
            return _problem(413, "too much text to render")
        return JSONResponse({"html": [render_markdown(t) for t in body.texts]})

    @router.get("/findings/{code}", response_class=HTMLResponse)
    def finding_page(code: str, request: Request) -> HTMLResponse:
        """The page behind every card's ``source.url`` (see :mod:`cds_service.web.findings`)."""
        try:
            finding = FindingCode(code)
        except ValueError:
            return _plain(404, "Unknown finding", "Tonicity has no finding with this code.")
        context = findings.page_context(finding, getattr(request.app.state, "thresholds", None))
        return HTMLResponse(pages.render("findings.html", **context), headers=_PAGE_HEADERS)

    @router.get("/trend/{token}", response_class=HTMLResponse)
    def trend_page(token: str, request: Request, view: str = "episode") -> HTMLResponse:
        now = datetime.now(UTC)
        try:
            payload, until = snapshots.load_snapshot_until(request.app.state.store, token, now)
        except snapshots.SnapshotExpired:
            return _plain(
                request,
                410,
                "This trend link has expired",
                "Trend links are kept for a limited time. Open the patient's record "
                "again to get a fresh one.",
            )
        except snapshots.SnapshotNotFound:
            return _plain(
                request,
                404,
                "Trend not found",
                "There is no trend page at this address. Check that the link was copied whole.",
            )
        if view not in ("episode", "stay"):
            view = "episode"
        html = _trend_html(token, payload, until, _time_zone(request), view)
        return HTMLResponse(html, headers=_trend_headers(request))

    return router


def _time_zone(request: Request) -> tzinfo:
    s = _settings(request)
    return s.server.tz if s is not None else UTC


def _trend_html(token: str, payload: dict[str, Any], until: datetime, tz: tzinfo, view: str) -> str:
    has_sodium = bool(payload.get("sodium"))
    svg = trend.chart_svg(snapshots.token_hash(token), payload, tz, view) if has_sodium else ""
    return pages.render(
        "trend.html",
        svg=Markup(svg),  # noqa: S704 - matplotlib's SVG from our own numbers and labels
        evaluated=trend.when(payload.get("now"), tz),
        expires=f"on {trend.when(until.isoformat(), tz)}",
        description=trend.describe(payload, tz, view),
        rows=(rows := trend.sodium_rows(payload, tz)),
        notes=any(r.note for r in rows),
        markers=payload.get("markers") or [],
        starts=payload.get("starts") or [],
        limits=payload.get("limits"),
        findings=payload.get("findings") or [],
        zone=trend.zone_name(tz),
        tz=tz,
        view=view,
        hidden=trend.hidden_before(payload, view) if has_sodium else 0,
        has_episode=bool((payload.get("limits") or {}).get("episode_start")),
    )


def _sample_request(request: Request, name: str, hook: str | None, shift: bool) -> Response:
    """A hook request for a sample: the request itself, or one built from a Bundle sample.

    With ``shift`` every date-time moves by (now - the sample's ``now``), so a story written
    for a fixed day plays out at the service's own clock, as ``tonicity replay`` does.
    """
    from cds_service.hooks.timeshift import shift_times

    try:
        sample, path = samples.find_sample(_sample_dir(request), name)
    except samples.SampleNotFound:
        return _problem(404, "no such sample")
    try:
        body = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return _problem(400, "this sample is not readable JSON")
    if not (isinstance(body, dict) and isinstance(body.get("hook"), str)):
        built = _build(body, hook or sample.hook or "patient-view")
        if built.status_code != 200:
            return built
        body = json.loads(built.body)
    if shift and sample.now:
        try:
            written_for = datetime.fromisoformat(sample.now)
        except ValueError:
            return _problem(400, f"the sample's 'now' {sample.now!r} is not ISO 8601")
        if written_for.tzinfo is None:
            written_for = written_for.replace(tzinfo=UTC)
        body = shift_times(body, datetime.now(UTC) - written_for)
    return JSONResponse(body)


def _build(record: object, hook: str) -> JSONResponse:
    """The hook request for a patient Bundle (a hook request passes through unchanged)."""
    from cds_service.errors import UserError
    from cds_service.hooks.client import build_request

    if isinstance(record, dict) and isinstance(record.get("hook"), str):
        return JSONResponse(record)
    if not isinstance(record, dict) or record.get("resourceType") != "Bundle":
        return _problem(400, "expected a CDS Hooks request or a FHIR Bundle of one patient")
    try:
        return JSONResponse(build_request(record, hook))
    except UserError as exc:
        return _problem(400, f"cannot build a {hook} request from this Bundle: {exc}")
