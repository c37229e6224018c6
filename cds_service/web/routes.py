"""Routes of the web pages: the workbench at ``/``, its assets and samples, the trend pages.

Nothing here touches the CDS Hooks endpoints: the workbench page calls them from the browser
like any other client would, with ``fetch``.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from fastapi import APIRouter, Body, Request
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, Response
from markupsafe import Markup
from pydantic import BaseModel, Field

from cds_service.hooks import snapshots
from cds_service.web import pages, quality, samples, trend
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

_PAGE_HEADERS = {
    "Content-Security-Policy": (
        "default-src 'none'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
        "img-src 'self' data:; connect-src 'self'; form-action 'self'; base-uri 'none'"
    ),
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",  # a trend token must never leak through a Referer
}
_TREND_HEADERS = {**_PAGE_HEADERS, "Cache-Control": "no-store", "X-Robots-Tag": "noindex"}


class RenderBody(BaseModel):
    texts: list[str] = Field(default_factory=list, max_length=200)


def _settings(request: Request) -> Any:
    return getattr(request.app.state, "settings", None)


def _auth_off(request: Request) -> bool:
    s = _settings(request)
    if s is None:
        return True
    return bool(getattr(s, "local_trial", False)) or not bool(s.auth.required)


def _sample_dir(request: Request) -> Path:
    return Path(getattr(request.app.state, "sample_dir", None) or samples.DEFAULT_SAMPLE_DIR)


def _plain(status: int, heading: str, message: str) -> HTMLResponse:
    html = pages.render("plain.html", heading=heading, message=message)
    return HTMLResponse(html, status_code=status, headers=_TREND_HEADERS)


def _problem(status: int, message: str) -> JSONResponse:
    """A FHIR OperationOutcome, as every other 4xx of the service."""
    code = "not-found" if status == 404 else "invalid"
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
    def bundle_request(record: Any = Body(...), hook: str = "patient-view") -> Response:
        """A pasted or uploaded patient Bundle turned into the hook request a client sends."""
        return _build(record, hook)

    @router.post("/workbench/render")
    def render(body: RenderBody) -> JSONResponse:
        if sum(len(t) for t in body.texts) > 500_000:
            return _problem(413, "too much text to render")
        return JSONResponse({"html": [render_markdown(t) for t in body.texts]})

    @router.get("/trend/{token}", response_class=HTMLResponse)
    def trend_page(token: str, request: Request) -> HTMLResponse:
        now = datetime.now(UTC)
        try:
            payload, until = snapshots.load_snapshot_until(request.app.state.store, token, now)
        except snapshots.SnapshotExpired:
            return _plain(
                410,
                "This trend link has expired",
                "Trend links are kept for a limited time. Open the patient's record "
                "again to get a fresh one.",
            )
        except snapshots.SnapshotNotFound:
            return _plain(
                404,
                "Trend not found",
                "There is no trend page at this address. Check that the link was copied whole.",
            )
        return HTMLResponse(_trend_html(token, payload, until), headers=_TREND_HEADERS)

    return router


def _trend_html(token: str, payload: dict[str, Any], until: datetime) -> str:
    svg = trend.chart_svg(snapshots.token_hash(token), payload) if payload.get("sodium") else ""
    return pages.render(
        "trend.html",
        svg=Markup(svg),  # noqa: S704 - matplotlib's SVG from our own numbers and labels
        evaluated=trend.when(payload.get("now")),
        expires=f"on {trend.when(until.isoformat())}",
        description=trend.describe(payload),
        rows=(rows := trend.sodium_rows(payload)),
        notes=any(r.note for r in rows),
        markers=payload.get("markers") or [],
        starts=payload.get("starts") or [],
        limits=payload.get("limits"),
        findings=payload.get("findings") or [],
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
