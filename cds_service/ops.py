"""Operations surface: liveness, readiness and Prometheus metrics.

``router`` carries three endpoints that a load balancer, an orchestrator and a metrics scraper
call; they carry no patient data and need no authentication:

- ``GET /healthz``: the process is alive and serving (200 ``{"status": "ok"}``).
- ``GET /readyz``: the database answers and the clinical data files are loaded (200), else
  503 with a FHIR OperationOutcome naming what is not ready. Orchestrators stop routing
  requests to a replica that is not ready.
- ``GET /metrics``: Prometheus text exposition of this process's counters (one registry per
  process; with several replicas the scraper sums across targets).

The service calls :func:`observe_request`, :func:`count_card` and :func:`count_fetch_error`
on its request path; they never raise.
"""

from __future__ import annotations

import logging
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, Response
from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from sqlalchemy import text

_log = logging.getLogger(__name__)

#: The registry of this process (not the global default, so tests and embedding stay isolated).
REGISTRY = CollectorRegistry(auto_describe=True)

REQUESTS = Counter(
    "tonicity_requests",
    "CDS Hooks service calls by service id and HTTP status",
    ("service", "status"),
    registry=REGISTRY,
)
REQUEST_SECONDS = Histogram(
    "tonicity_request_seconds",
    "Time to answer a CDS Hooks service call, by service id",
    ("service",),
    buckets=(0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0),
    registry=REGISTRY,
)
CARDS = Counter(
    "tonicity_cards",
    "Cards returned, by finding code (source.topic.code)",
    ("code",),
    registry=REGISTRY,
)
FHIR_FETCH_ERRORS = Counter(
    "tonicity_fhir_fetch_errors",
    "Failed FHIR fetches for missing prefetch, by kind (timeout, http, auth, invalid ...)",
    ("kind",),
    registry=REGISTRY,
)

_MAX_LABEL = 64


def _label(value: object) -> str:
    """A bounded label value: metrics must not grow without limit on caller-chosen strings."""
    return str(value)[:_MAX_LABEL] or "unknown"


def observe_request(service_id: str, status: int | str, seconds: float) -> None:
    """Count one service call and record its latency."""
    try:
        REQUESTS.labels(service=_label(service_id), status=_label(status)).inc()
        REQUEST_SECONDS.labels(service=_label(service_id)).observe(max(0.0, float(seconds)))
    except Exception:  # metrics must never break a clinical response
        _log.exception("metrics: observe_request failed")


def count_card(finding_code: str) -> None:
    """Count one card returned with this finding code."""
    try:
        CARDS.labels(code=_label(finding_code)).inc()
    except Exception:
        _log.exception("metrics: count_card failed")


def count_fetch_error(kind: str) -> None:
    """Count one failed FHIR fetch of this kind."""
    try:
        FHIR_FETCH_ERRORS.labels(kind=_label(kind)).inc()
    except Exception:
        _log.exception("metrics: count_fetch_error failed")


def _outcome(issues: list[str]) -> dict[str, Any]:
    return {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": "transient", "diagnostics": msg} for msg in issues],
    }


def readiness_problems(state: Any) -> list[str]:
    """What keeps this replica from serving (empty when ready). ``state`` is ``app.state``."""
    problems: list[str] = []
    store = getattr(state, "store", None)
    if store is None:
        problems.append("store not initialised")
    else:
        try:
            with store.engine.connect() as conn:
                conn.execute(text("SELECT 1"))
        except Exception as exc:
            problems.append(f"database not reachable: {type(exc).__name__}")
    if getattr(state, "thresholds", None) is None:
        problems.append("clinical data files not loaded (thresholds)")
    return problems


router = APIRouter(tags=["operations"])


@router.get("/healthz", include_in_schema=False)
async def healthz() -> dict[str, str]:  # on the event loop itself: no thread to wait for
    return {"status": "ok"}


@router.get("/readyz", include_in_schema=False)
def readyz(request: Request) -> JSONResponse:
    problems = readiness_problems(request.app.state)
    if problems:
        return JSONResponse(_outcome(problems), status_code=503, media_type="application/fhir+json")
    body = {"status": "ready"}
    alert_settings = getattr(request.app.state, "alert_settings", None)
    if alert_settings is not None:  # which alert settings are live (cds_service/alerts)
        body["alertSettingsDigest"] = alert_settings.digest
    return JSONResponse(body)


@router.get("/metrics", include_in_schema=False)
def metrics(request: Request) -> Response:
    settings = getattr(request.app.state, "settings", None)
    if settings is not None and settings.server.metrics_port is not None:
        return JSONResponse(  # served on the internal metrics port only
            _outcome(["not here: /metrics is served on server.metrics_port"]),
            status_code=404,
            media_type="application/fhir+json",
        )
    return Response(generate_latest(REGISTRY), media_type=CONTENT_TYPE_LATEST)


def start_metrics_server(host: str, port: int) -> Any:
    """``/metrics`` (this process's registry) on its own port, in a thread; returns the
    server (``shutdown()`` stops it). OSError when the port cannot be bound."""
    from prometheus_client import start_http_server

    server, _thread = start_http_server(port, addr=host, registry=REGISTRY)
    return server
