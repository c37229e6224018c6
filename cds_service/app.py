"""The FastAPI application: routes only, no clinical logic.

- ``GET /cds-services``: discovery.
- ``POST /cds-services/{id}``: a hook call (see :mod:`cds_service.hooks.service`).
- ``POST /cds-services/{id}/feedback``: CDS Hooks 2.0 feedback, stored with the card log.
- ops (``/healthz``, ``/readyz``, ``/metrics``) and the web workbench and trend pages.

Every error is a FHIR OperationOutcome: 400 for what a caller sent wrong (FastAPI's 422 is
answered as 400), 401 for failed client authentication (with ``WWW-Authenticate: Bearer``),
404 for an unknown service, 412 when required data cannot be had, 413 for a body over
``server.max_body_bytes``, and 500, without internals, for our own faults only.
"""

from __future__ import annotations

import gc
import logging
import time
from collections.abc import AsyncIterator, Awaitable, Callable, MutableMapping
from contextlib import asynccontextmanager, nullcontext
from datetime import UTC, datetime
from typing import Any

import httpx
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.middleware.cors import CORSMiddleware
from fastapi.responses import JSONResponse, Response
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException as StarletteHTTPException

from cds_service import logs, ops
from cds_service.alerts import live as alerts
from cds_service.config import Settings
from cds_service.errors import UserError
from cds_service.hooks.auth import Authenticator, AuthError
from cds_service.hooks.bodies import (
    ECHO_LIMIT,
    BodyTooLarge,
    declared_length,
    echo,
    parse_body,
    read_body,
    require_json_media_type,
)
from cds_service.hooks.registry import SERVICES, discovery
from cds_service.hooks.service import HookError, Outcome, evaluate
from cds_service.store import Store
from cds_service.store.feedback import record_feedback
from cds_service.workers import EvaluationPool, LargeCallGate, collector_held

_log = logging.getLogger(__name__)

LOCAL_TRIAL_HEADER = "X-Tonicity-Auth"
LOCAL_TRIAL_VALUE = "disabled (local trial - do not use with real patient data)"

_ISSUE_CODES = {
    400: "invalid",
    401: "login",
    403: "forbidden",
    404: "not-found",
    405: "not-supported",
    412: "incomplete",
    413: "too-costly",
    415: "not-supported",
    500: "exception",
    503: "transient",
}


#: Longest ``diagnostics`` of an answer: what a caller sent is never echoed without bound.
MAX_DIAGNOSTICS = 500


def operation_outcome(
    status: int, message: str, headers: dict[str, str] | None = None
) -> JSONResponse:
    if len(message) > MAX_DIAGNOSTICS:
        message = message[: MAX_DIAGNOSTICS - 20] + " ... (message cut)"
    body = {
        "resourceType": "OperationOutcome",
        "issue": [
            {
                "severity": "error" if status < 500 else "fatal",
                "code": _ISSUE_CODES.get(status, "processing"),
                "diagnostics": message,
            }
        ],
    }
    return JSONResponse(body, status_code=status, headers=headers)


class Busy(Exception):
    """Too many large calls in flight: 503 with Retry-After."""


def _local_trial(settings: Settings) -> bool:
    return settings.local_trial or not settings.auth.required


class _ResponseHeaders:
    """Outermost layer of ours: a request id per call (``X-Request-ID`` kept when well formed)
    in logs and response, the local-trial warning header when auth is off, and a 500
    OperationOutcome without internals for any fault that escaped the routes, so even that
    response carries both headers."""

    def __init__(self, app: Callable[..., Awaitable[None]], local_trial: bool) -> None:
        self.app = app
        self.local_trial = local_trial

    async def __call__(self, scope: MutableMapping[str, Any], receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        incoming = dict(scope.get("headers") or []).get(b"x-request-id", b"")
        rid, token = logs.set_request_id(incoming.decode("latin-1") or None)
        extra = [(b"x-request-id", rid.encode())]
        if self.local_trial:
            extra.append((LOCAL_TRIAL_HEADER.lower().encode(), LOCAL_TRIAL_VALUE.encode()))
        started = False

        async def send_with_headers(message: MutableMapping[str, Any]) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
                message["headers"] = [*message.get("headers", []), *extra]
            await send(message)

        try:
            await self.app(scope, receive, send_with_headers)
        except Exception as exc:
            _log.error("internal error: %s", type(exc).__name__, exc_info=exc)
            if started:
                raise
            response = operation_outcome(500, "internal error; the request was not evaluated")
            await response(scope, receive, send_with_headers)
        finally:
            logs.reset_request_id(token)


def create_app(settings: Settings) -> FastAPI:
    """The service for these settings; resources are opened and closed by the lifespan."""

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        from cds_service.clinical.thresholds import load_thresholds
        from cds_service.fhir import warm_up

        # Parse unit tables and FHIR models now, not on the first clinician's request
        # (it cost about 0.8 s there).
        warm_up()
        store = Store(settings.storage.url, migrate=settings.storage.migrate_at_start)
        http = _http_client(settings)
        pool = EvaluationPool(settings.server.evaluation_threads, lambda: _http_client(settings))
        try:
            app.state.store = store
            app.state.http = http
            app.state.pool = pool
            app.state.large_calls = LargeCallGate(settings.server.max_large_calls)
            app.state.thresholds = load_thresholds(settings.clinical)
            app.state.authenticator = Authenticator(settings, store, http)
            # Everything loaded so far (models, schemas, data tables: ~180,000 objects) lives
            # as long as the process: take it out of the collector's sight, or each full
            # collection walks it again (~300 ms, a p99 spike on whichever call it hits).
            gc.collect()
            gc.freeze()
            yield
        finally:
            await run_in_threadpool(pool.close)
            await http.aclose()
            store.close()

    app = FastAPI(
        title="Tonicity",
        description="Hyponatremia work-up and sodium order safety as CDS Hooks 2.0 services.",
        lifespan=lifespan,
        docs_url=None,  # served below from the package, not from a CDN
        redoc_url=None,
    )
    _install_docs(app)
    app.state.settings = settings
    # CDS Hooks 2.0 (Security and Safety, CORS): browser-based CDS clients need CORS. Any
    # origin may ask, without credentials: calls authenticate with a bearer JWT the client
    # attaches itself, never with cookies, so a foreign page gains nothing by being allowed.
    app.add_middleware(
        CORSMiddleware,
        allow_origins=["*"],
        allow_methods=["GET", "POST", "OPTIONS"],
        allow_headers=["Authorization", "Content-Type", "X-Request-ID"],
        expose_headers=["X-Request-ID", LOCAL_TRIAL_HEADER],
        max_age=600,
    )
    app.add_middleware(_ResponseHeaders, local_trial=_local_trial(settings))
    _install_error_handlers(app)
    _install_routes(app, settings)
    _include_routers(app)
    return app


#: Swagger UI's files, from the swagger-ui-bundle package (Apache-2.0), so that ``/docs``
#: works on a hospital network without internet access.
_DOCS_ASSETS = {
    "swagger-ui-bundle.js": "text/javascript; charset=utf-8",
    "swagger-ui.css": "text/css; charset=utf-8",
}


def _install_docs(app: FastAPI) -> None:
    from fastapi.openapi.docs import get_swagger_ui_html
    from fastapi.responses import FileResponse, HTMLResponse
    from swagger_ui_bundle import swagger_ui_path

    @app.get("/docs", include_in_schema=False)
    async def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=app.openapi_url or "/openapi.json",
            title="Tonicity - API",
            swagger_js_url="/docs-assets/swagger-ui-bundle.js",
            swagger_css_url="/docs-assets/swagger-ui.css",
            swagger_favicon_url="/static/favicon.svg",
        )

    @app.get("/docs-assets/{name}", include_in_schema=False)
    async def docs_asset(name: str) -> Any:
        media = _DOCS_ASSETS.get(name)
        if media is None:
            return operation_outcome(404, "no such documentation asset")
        return FileResponse(
            f"{swagger_ui_path}/{name}",
            media_type=media,
            headers={"Cache-Control": "public, max-age=86400"},
        )


def _http_client(settings: Settings) -> httpx.AsyncClient:
    """The client for FHIR fetches and key sets (one per event loop, made at start)."""
    return httpx.AsyncClient(
        timeout=httpx.Timeout(
            settings.fhir.time_budget_seconds, connect=settings.fhir.connect_timeout_seconds
        ),
        follow_redirects=False,
    )


def _install_error_handlers(app: FastAPI) -> None:
    @app.exception_handler(RequestValidationError)
    async def _validation(_request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = exc.errors()
        first = errors[0] if errors else {}
        where = ".".join(str(p)[:ECHO_LIMIT] for p in first.get("loc", ())) or "request"
        return operation_outcome(400, f"invalid request: {where}: {first.get('msg', 'invalid')}")

    @app.exception_handler(StarletteHTTPException)
    async def _http(_request: Request, exc: StarletteHTTPException) -> JSONResponse:
        return operation_outcome(exc.status_code, str(exc.detail), getattr(exc, "headers", None))

    @app.exception_handler(HookError)
    async def _hook(_request: Request, exc: HookError) -> JSONResponse:
        return operation_outcome(exc.status, exc.message)

    @app.exception_handler(BodyTooLarge)
    async def _too_large(request: Request, _exc: BodyTooLarge) -> JSONResponse:
        limit = request.app.state.settings.server.max_body_bytes
        return operation_outcome(413, f"the request body is larger than {limit} bytes")

    @app.exception_handler(Busy)
    async def _busy(request: Request, _exc: Busy) -> JSONResponse:
        server = request.app.state.settings.server
        return operation_outcome(
            503,
            f"busy: {server.max_large_calls} large calls (over {server.large_call_bytes} bytes) "
            "are being evaluated; retry later",
            {"Retry-After": str(server.busy_retry_after_seconds)},
        )

    @app.exception_handler(Exception)
    async def _internal(_request: Request, exc: Exception) -> JSONResponse:
        _log.error("internal error: %s", type(exc).__name__, exc_info=exc)
        return operation_outcome(500, "internal error; the request was not evaluated")


async def _authenticate(request: Request, settings: Settings, *also_accept: str) -> Any:
    """The calling client, or a 401 OperationOutcome as an exception. The token's ``aud`` is
    this endpoint's public URL (or one of ``also_accept``)."""
    authenticator = request.app.state.authenticator
    endpoint = f"{settings.server.public_base_url}{request.url.path}"
    try:
        return await authenticator.authenticate(
            request.headers.get("authorization"), endpoint, *also_accept
        )
    except AuthError as exc:
        raise _Unauthorized(exc.reason or "authentication failed") from None


class _Unauthorized(Exception):
    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


def _install_routes(app: FastAPI, settings: Settings) -> None:
    # The alert policy's settings, checked now (a refused configuration never serves).
    alert_settings = alerts.settings_for(settings, SERVICES)
    app.state.alert_settings = alert_settings

    @app.exception_handler(_Unauthorized)
    async def _unauthorized(_request: Request, exc: _Unauthorized) -> JSONResponse:
        return operation_outcome(
            401, f"authentication failed: {exc.reason}", {"WWW-Authenticate": "Bearer"}
        )

    @app.get("/cds-services")
    async def list_services(request: Request) -> JSONResponse:
        await _authenticate(request, settings)
        return JSONResponse(alerts.annotate_discovery(discovery(), alert_settings))

    @app.post("/cds-services/{service_id}")
    async def call_service(service_id: str, request: Request) -> Response:
        started = time.perf_counter()
        status = 500
        outcome = None
        caller = None
        try:
            caller = await _authenticate(request, settings)
            if service_id not in SERVICES:
                raise HookError(404, f"no CDS service with id {echo(service_id)}")
            require_json_media_type(request)
            outcome = await _evaluate_off_loop(request, settings, caller, service_id)
            status = 200
            return Response(outcome.body, media_type="application/json")
        except HookError as exc:
            status = exc.status
            raise
        except BodyTooLarge:
            status = 413
            raise
        except Busy:
            status = 503
            raise
        except _Unauthorized:
            status = 401
            raise
        finally:
            seconds = time.perf_counter() - started
            _observe(service_id, status, seconds)
            _audit(settings, caller, service_id, status, seconds, outcome)

    @app.post("/cds-services/{service_id}/feedback")
    async def feedback(service_id: str, request: Request) -> JSONResponse:
        # CDS clients commonly sign feedback for the service URL they called: accepted too.
        service_url = f"{settings.server.public_base_url}/cds-services/{service_id}"
        caller = await _authenticate(request, settings, service_url)
        if service_id not in SERVICES:
            raise HookError(404, f"no CDS service with id {echo(service_id)}")
        require_json_media_type(request)
        raw = await read_body(request, settings.server.max_body_bytes)
        try:
            stored = await run_in_threadpool(
                lambda: record_feedback(
                    request.app.state.store,
                    service_id,
                    parse_body(raw),
                    getattr(caller, "issuer", None),
                    datetime.now(UTC),
                    alerts.quiet_maker(alert_settings),
                )
            )
        except UserError as exc:
            raise HookError(400, str(exc)) from None
        return JSONResponse({"stored": stored})


async def _evaluate_off_loop(
    request: Request, settings: Settings, caller: Any, service_id: str
) -> Outcome:
    """Read the body here, then parse, ingest and evaluate it on the evaluation pool
    (:mod:`cds_service.workers`); a large body needs a free large-call slot, else 503."""
    state = request.app.state
    server = settings.server
    gate: LargeCallGate = state.large_calls
    declared = declared_length(request)
    replay_call = request.headers.get(alerts.REPLAY_HEADER)  # tonicity replay's call id
    if replay_call is not None and not alerts.REPLAY_CALL.fullmatch(replay_call):
        raise HookError(400, f"{alerts.REPLAY_HEADER} must be 1-64 letters, digits or -")
    large = declared is not None and declared > server.large_call_bytes
    if large and not gate.try_enter():
        raise Busy  # refused before its body is read
    try:  # from here on, a slot taken is given back whatever happens
        raw = await read_body(request, server.max_body_bytes)
        if not large and len(raw) > server.large_call_bytes:  # sent without Content-Length
            if not gate.try_enter():
                raise Busy
            large = True
        now = datetime.now(UTC)

        async def work(http: httpx.AsyncClient) -> Outcome:
            with collector_held() if large else nullcontext():
                return await evaluate(
                    parse_body(raw),
                    settings=settings,
                    thresholds=state.thresholds,
                    now=now,
                    http=http,
                    caller=caller,
                    service_id=service_id,
                    store=state.store,
                    authenticator=state.authenticator,
                    replay_call=replay_call,
                )

        return await state.pool.run(work, large=large)
    finally:
        if large:
            gate.leave()


def _observe(service_id: str, status: int, seconds: float) -> None:
    ops.observe_request(service_id if service_id in SERVICES else "unknown", status, seconds)


def _audit(
    settings: Settings,
    caller: object,
    service_id: str,
    status: int,
    seconds: float,
    outcome: Any,
) -> None:
    """One audit line per hook call: client, service, finding codes, latency, status."""
    try:
        patient_hash = (
            logs.hash_patient_id(settings.logging.patient_id_salt, outcome.patient_id)
            if outcome
            else None
        )
        logs.audit(
            client=getattr(caller, "issuer", None),
            service=service_id if service_id in SERVICES else "unknown",
            finding_codes=list(outcome.codes) if outcome else [],
            latency_ms=seconds * 1000,
            status=status,
            patient_hash=patient_hash,
        )
    except Exception:  # the audit line must never change the answer
        _log.exception("audit line not written")


def _include_routers(app: FastAPI) -> None:
    from cds_service.web import create_router

    app.include_router(ops.router)
    app.include_router(create_router())
