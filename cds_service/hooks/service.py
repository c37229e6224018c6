"""One hook call, from request body to response body.

:func:`evaluate_request` is the core behind both ``POST /cds-services/{id}`` and
``tonicity evaluate``: it validates the body, checks the hook and its context, gathers the data
(prefetch first, then the client's FHIR server for what is missing, when allowed), builds the
clinical context, runs the clinical engine and renders one card per finding code. With a store
it also logs the cards (patient as a salted hash) and saves a trend snapshot linked from the
work-up and correction-rate cards. Callers' mistakes raise :class:`HookError` (400/404/412).
"""

from __future__ import annotations

import asyncio
import contextvars
import functools
import logging
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import httpx
from pydantic import ValidationError

from cds_service import logs, ops
from cds_service.alerts import live as alerts
from cds_service.clinical import engine
from cds_service.clinical.context import Analyte, ClinicalContext
from cds_service.clinical.findings import Finding, FindingCode
from cds_service.config import Settings
from cds_service.errors import UserError
from cds_service.fhir import build_context, timeline
from cds_service.fhir.builders import OrderContext
from cds_service.gcpause import collector_paused
from cds_service.hooks import snapshots
from cds_service.hooks.access import (
    AccessRefused,
    Grant,
    check_authorization,
    https_required,
    query_interaction,
)
from cds_service.hooks.cards import (
    one_per_code,
    render_card,
    rests_on,
    suggested_tests,
    with_quieting_reasons,
)
from cds_service.hooks.fetch import fetch_all
from cds_service.hooks.models import Card, HookRequest, HookResponse, Link, encode, to_json
from cds_service.hooks.prefetch import PrefetchState, check_prefetch
from cds_service.hooks.registry import (
    LAB_GROUPS,
    REQUIRED_KEYS,
    SERVICES,
    Service,
    fill,
    prefetch_templates,
)
from cds_service.store.cards import CardLogRow, add_cards

_log = logging.getLogger(__name__)

#: A FHIR id (FHIR R4 ``id`` datatype); patient ids outside it never reach a query.
FHIR_ID = re.compile(r"[A-Za-z0-9\-.]{1,64}")
#: Ids the datatype allows that a URL path reads as a dot segment (RFC 3986 section 3.3).
DOT_SEGMENTS = frozenset({".", ".."})

#: Codes whose cards link to the trend view (work-up and correction-rate surveillance).
TREND_CODES = frozenset(
    {
        FindingCode.TONICITY_UNKNOWN,
        FindingCode.HYPOTONIC,
        FindingCode.ISOTONIC,
        FindingCode.HYPERTONIC,
        FindingCode.OSMOLAL_GAP,
        FindingCode.DILUTE_URINE,
        FindingCode.LOW_URINE_SODIUM,
        FindingCode.SIADH_PATTERN,
        FindingCode.DRUG_ASSOCIATED,
        FindingCode.ENDOCRINE_SCREEN,
        FindingCode.CORRECTION_RATE,
    }
)

#: Readable names of the prefetch keys, for "not available" notes on cards.
KEY_NAMES = {
    "patient": "patient demographics",
    "sodium": "sodium results",
    **{key: group.name for key, group in LAB_GROUPS.items()},
    "medicationRequests": "active medication orders",
    "medicationStatements": "medication statements",
    "conditions": "active problems",
}


#: Which card carries the trend link when several could: the first of these codes present.
TREND_OWNERS: tuple[FindingCode, ...] = (
    FindingCode.CORRECTION_RATE,  # the trend is the evidence of an overcorrection
    FindingCode.HYPOTONIC,
    FindingCode.TONICITY_UNKNOWN,
    FindingCode.ISOTONIC,
    FindingCode.HYPERTONIC,
    FindingCode.SIADH_PATTERN,
    FindingCode.DILUTE_URINE,
    FindingCode.LOW_URINE_SODIUM,
    FindingCode.OSMOLAL_GAP,
    FindingCode.ENDOCRINE_SCREEN,
    FindingCode.DRUG_ASSOCIATED,
)


def trend_card(findings: list[Finding]) -> Finding | None:
    """The one finding whose card offers the trend link (once per response)."""
    by_code = {f.code: f for f in findings}
    return next((by_code[c] for c in TREND_OWNERS if c in by_code), None)


def no_cards_reason(ctx: Any, settings: Settings, thresholds: Any) -> str | None:
    """Why a call gives no cards although the record has a low sodium or no usable sodium,
    in one line (None when the sodium is simply not low: quiet by design)."""
    series = ctx.series.get(Analyte.SODIUM, ())
    current = ctx.current.get(Analyte.SODIUM)
    if current is None:
        if not series:
            rejected = [r for r in ctx.rejected if r.analyte is Analyte.SODIUM]
            if rejected:
                return (
                    f"no usable sodium: {len(rejected)} sodium result(s) not used "
                    f"({rejected[0].reason})"
                )
            return (
                "no usable sodium at the evaluation time "
                f"{ctx.now.astimezone(UTC):%Y-%m-%dT%H:%M:%SZ}: no sodium result Tonicity reads, "
                "or all dated after that time (`tonicity inspect --now ...` shows how each "
                "resource was understood)"
            )
        newest = series[-1]
        window = timeline.lookback(Analyte.SODIUM, settings.ingest)
        hours = window.total_seconds() / 3600
        at = newest.time.astimezone(UTC)
        return (
            f"the newest sodium ({newest.value:g} mmol/L, taken {at:%Y-%m-%dT%H:%M:%SZ}) is "
            f"older than the sodium lookback of {hours:g} h at the evaluation time "
            f"{ctx.now.astimezone(UTC):%Y-%m-%dT%H:%M:%SZ}; to evaluate the record as of that "
            f"result use --now {(at + timedelta(hours=1)):%Y-%m-%dT%H:%M:%SZ}"
        )
    if current.value < thresholds.sodium_lower_normal:
        return (
            f"the sodium {current.value:g} mmol/L is low, but no rule of this hook applies "
            "(for order hooks: no drafted order Tonicity checks)"
        )
    return None


class HookError(Exception):
    """A caller's mistake or missing data: answered with ``status`` and an OperationOutcome."""

    def __init__(self, status: int, message: str) -> None:
        super().__init__(message)
        self.status = status
        self.message = message


@dataclass(frozen=True, slots=True)
class HookCall:
    """A validated hook call for one service."""

    service: Service
    request: HookRequest
    patient_id: str
    draft_orders: tuple[dict[str, Any], ...] = ()
    selections: tuple[str, ...] = ()


@dataclass(slots=True)
class Outcome:
    """What one evaluation produced, for the response, the card log and the audit line."""

    response: dict[str, Any]
    service_id: str
    #: ``response`` encoded (``models.encode``), on the evaluation thread, not the event loop.
    body: bytes
    patient_id: str
    codes: list[str] = field(default_factory=list)
    unavailable: dict[str, str] = field(default_factory=dict)
    #: Finding codes kept back by the alert policy (suppressed or silent), for the audit line.
    kept_back: list[str] = field(default_factory=list)
    #: Why there are no cards, when the record has a low or no usable sodium (one line).
    no_cards: str | None = None


def resolve_service(service_id: str | None, hook: object) -> Service:
    if service_id is not None:
        service = SERVICES.get(service_id)
        if service is None:
            raise HookError(404, f"no CDS service with id {service_id!r}")
        return service
    for service in SERVICES.values():
        if service.hook == hook:
            return service
    raise HookError(400, f"no Tonicity service answers the hook {hook!r}")


def parse_call(body: object, service_id: str | None = None) -> HookCall:
    """Validate a request body for a service (by id, or by its hook). Raises HookError."""
    if not isinstance(body, Mapping):
        raise HookError(400, "the request body must be a JSON object")
    service = resolve_service(service_id, body.get("hook"))
    try:
        request = HookRequest.model_validate(body)
    except ValidationError as exc:
        raise HookError(400, f"invalid hook request: {_first_error(exc)}") from None
    if request.hook != service.hook:
        raise HookError(
            400, f"service {service.id!r} answers {service.hook!r}, not {request.hook!r}"
        )
    ctx = request.context
    for key in service.required_context:
        if ctx.get(key) in (None, "", [], {}):
            raise HookError(400, f"context.{key} is required for the {service.hook} hook")
    patient_id = ctx.get("patientId")
    if (
        not isinstance(patient_id, str)
        or not FHIR_ID.fullmatch(patient_id)
        or patient_id in DOT_SEGMENTS
    ):
        raise HookError(400, "context.patientId must be a FHIR id (and not '.' or '..')")
    drafts: tuple[dict[str, Any], ...] = ()
    selections: tuple[str, ...] = ()
    if "draftOrders" in service.required_context:
        drafts = _draft_resources(ctx.get("draftOrders"))
    if "selections" in service.required_context:
        selections = _selections(ctx.get("selections"), drafts)
    return HookCall(service, request, patient_id, drafts, selections)


def _draft_resources(bundle: object) -> tuple[dict[str, Any], ...]:
    if not isinstance(bundle, Mapping) or bundle.get("resourceType") != "Bundle":
        raise HookError(400, "context.draftOrders must be a FHIR Bundle")
    out = []
    for entry in bundle.get("entry") or []:
        resource = entry.get("resource") if isinstance(entry, Mapping) else None
        if not isinstance(resource, Mapping) or not isinstance(resource.get("resourceType"), str):
            raise HookError(400, "every entry of context.draftOrders must hold a resource")
        out.append(dict(resource))
    return tuple(out)


def _selections(value: object, drafts: tuple[dict[str, Any], ...]) -> tuple[str, ...]:
    if not isinstance(value, list) or not all(isinstance(s, str) for s in value):
        raise HookError(400, "context.selections must be a list of 'ResourceType/id' strings")
    known = {f"{d.get('resourceType')}/{d.get('id')}" for d in drafts}
    unknown = [s for s in value if s not in known]
    if unknown:
        raise HookError(400, f"context.selections names no draft order: {unknown[0][:100]}")
    return tuple(value)


def _first_error(exc: ValidationError) -> str:
    err = exc.errors()[0]
    where = ".".join(str(p) for p in err.get("loc", ())) or "body"
    return f"{where}: {err.get('msg', 'invalid')}"


def local_trial(settings: Settings) -> bool:
    """A local trial: started without a configuration, or with authentication switched off
    (DESIGN.md: ``auth.required = false`` only for local trials)."""
    return settings.local_trial or not settings.auth.required


def _patient_unusable(value: object, patient_id: str) -> bool:
    """The prefetched ``patient`` gives no usable Patient: null, another resource type, or
    another patient (the client's ``null`` for a read means it found nothing)."""
    return not (
        isinstance(value, Mapping)
        and value.get("resourceType") == "Patient"
        and value.get("id") in (None, patient_id)
    )


@dataclass(slots=True)
class _Access:
    """Whether this call may fetch from its fhirServer, the grant, and why not."""

    server: str | None = None
    grant: Grant | None = None
    refused: str | None = None

    def covers(self, query: str) -> bool:
        return self.grant is None or self.grant.covers(*query_interaction(query))


def _access(
    call: HookCall, settings: Settings, http: object, caller: object, authenticator: Any
) -> _Access:
    """May this call fetch (see :mod:`cds_service.hooks.access`)? Raises HookError 401 for an
    authorization that cannot be used for this patient."""
    request = call.request
    auth = request.fhirAuthorization
    grant = None
    if auth is not None:
        try:
            grant = check_authorization(auth, call.patient_id)
        except AccessRefused as exc:
            raise HookError(401, str(exc)) from None
    server = request.fhirServer
    if http is None or not server or authenticator is None:
        return _Access(refused="no FHIR access to fetch it")
    if not authenticator.fhir_server_allowed(caller, server):
        return _Access(refused="no FHIR access to fetch it (fhirServer not allowed)")
    trial = local_trial(settings)
    why = https_required(server, local_trial=trial)
    if why:
        return _Access(refused=why)
    if auth is None and not trial:
        return _Access(refused="no fhirAuthorization to fetch it with")
    return _Access(server=server, grant=grant)


async def gather_data(
    call: HookCall,
    settings: Settings,
    *,
    http: httpx.AsyncClient | None = None,
    caller: object = None,
    authenticator: Any = None,
) -> PrefetchState:
    """Prefetch, then fetch what is missing (a null or unusable ``patient`` too) and the later
    pages of paged prefetched Bundles, when the caller may send us to its FHIR server."""
    templates = prefetch_templates()
    try:
        state = check_prefetch(call.request.prefetch, list(templates))
    except UserError as exc:
        raise HookError(400, str(exc)) from None
    request = call.request
    access = _access(call, settings, http, caller, authenticator)
    if "patient" in state.data and _patient_unusable(state.data["patient"], call.patient_id):
        state.to_fetch.append("patient")
    queries = {key: fill(templates[key], request.context) for key in state.to_fetch}
    paged = state.paged()
    if access.server is None:
        for key in state.to_fetch:
            if key in state.data:  # the client's null or unusable Patient stands
                continue
            state.settle(key, None, f"not prefetched, and {access.refused}")
        for key in paged:
            state.partial[key] = f"only the first page was sent, and {access.refused}"
        return state
    not_granted = [
        k for k in [*queries, *paged] if not access.covers(fill(templates[k], request.context))
    ]
    for key in not_granted:
        why = "the access token's scope does not grant this read"
        if key in paged:
            state.partial[key] = f"only the first page was sent, and {why}"
            paged.pop(key)
        else:
            queries.pop(key)
            if key not in state.data:
                state.settle(key, None, f"not prefetched, and {why}")
    assert http is not None
    token = request.fhirAuthorization.access_token if request.fhirAuthorization else None
    results = await fetch_all(
        http,
        access.server,
        queries,
        token,
        budget_seconds=settings.fhir.time_budget_seconds,
        max_pages=settings.fhir.max_pages,
        continued=paged,
    )
    for key, result in results.items():
        if result.error is not None:
            _count_fetch_error(result.kind or "unknown")
        if result.data is None and key in state.data:  # keep the client's null or Patient
            state.unavailable[key] = result.error or "not available"
            continue
        state.settle(key, result.data, result.error, partial=result.partial)
    return state


def _count_fetch_error(kind: str) -> None:
    ops.count_fetch_error(kind)


def _require(state: PrefetchState) -> None:
    missing = [k for k in REQUIRED_KEYS if k in state.unavailable and k not in state.data]
    if missing:
        reasons = "; ".join(f"{k}: {state.unavailable[k]}" for k in missing)
        raise HookError(412, f"required data not available ({reasons})")


def read_call(
    call: HookCall, state: PrefetchState, settings: Settings, now: datetime, *, report_lines: bool
) -> Any:
    """The FHIR layer's reading of a call's data at ``now`` (``Ingested``): one place for the
    hook path and the workbench, so both read a record the same way."""
    return build_context(
        state.resources(),
        now=now,
        settings=settings.ingest,
        patient_id=call.patient_id,
        draft_orders=call.draft_orders,
        selections=call.selections,
        report_lines=report_lines,
        partial_reads=state.partial,
        display_units=settings.display.units,
    )


def findings_for(call: HookCall, ctx: ClinicalContext, thresholds: Any) -> list[Finding]:
    """The clinical core's findings for the call's hook."""
    if call.service.hook == "patient-view":
        return engine.evaluate_workup(ctx, thresholds)
    return engine.evaluate_orders(ctx, thresholds)


async def evaluate_request(body: object, **kwargs: Any) -> dict[str, Any]:
    """The response body for a hook call; keywords as :func:`evaluate`. Raises HookError."""
    return (await evaluate(body, **kwargs)).response


def evaluate_request_sync(body: object, **kwargs: Any) -> dict[str, Any]:
    """:func:`evaluate_request` for synchronous callers (no running event loop)."""
    return asyncio.run(evaluate_request(body, **kwargs))


async def evaluate(
    body: object,
    *,
    settings: Settings,
    thresholds: Any,
    now: datetime,
    http: httpx.AsyncClient | None = None,
    caller: object = None,
    service_id: str | None = None,
    store: Any = None,
    authenticator: Any = None,
    replay_call: str | None = None,
) -> Outcome:
    """Evaluate one hook call (see module doc): ``settings``, ``thresholds`` and ``now`` are
    required; ``http`` + ``authenticator`` enable fetching from the client's FHIR server;
    ``store`` enables the card log and the trend snapshot; ``service_id`` None means the
    service answering the body's hook; ``replay_call`` marks a call of ``tonicity replay``
    (logged as such, never suppressed, left out of the figures)."""
    call = parse_call(body, service_id)
    state = await gather_data(call, settings, http=http, caller=caller, authenticator=authenticator)
    _require(state)
    with collector_paused():  # allocation-heavy and synchronous: see cds_service/gcpause.py
        # the hook response does not carry the ingest report
        ingested = read_call(call, state, settings, now, report_lines=False)
    ctx = ingested.context
    findings = one_per_code(findings_for(call, ctx, thresholds))
    # Alert burden (cds_service/alerts): settings, overrides and repeat suppression decide
    # which findings become cards; the others are logged with why.
    alert = alerts.settings_for(settings, SERVICES)
    gate = await alerts.gate(
        findings,
        store=store,
        settings=settings,
        alert=alert,
        service_id=call.service.id,
        patient_id=call.patient_id,
        user_id=call.request.context.get("userId"),
        now=now,
        replay_call=replay_call,
    )
    findings = gate.shown
    unavailable = [
        f"{KEY_NAMES.get(k, k)}: {reason}" for k, reason in sorted(state.unavailable.items())
    ]
    snapshot = None
    if store is not None and any(f.code in TREND_CODES for f in findings):
        snapshot = _snapshot(settings, ctx, findings, thresholds, now)

    tests = suggested_tests(findings)
    trend_owner = trend_card(findings)
    order = OrderContext.from_hook(call.patient_id, call.request.context, now)
    base = settings.server.public_base_url

    def render(links: list[Link]) -> list[Card]:
        return [
            with_quieting_reasons(  # override reasons of the alert policy (cds_service/alerts)
                render_card(
                    f,
                    now=now,
                    patient_id=call.patient_id,
                    unavailable=unavailable,
                    links=links if f is trend_owner else (),
                    tests=offered,
                    partial=[
                        f"{KEY_NAMES.get(k, k)}: {state.partial.get(k, 'first page only')}"
                        for k in ctx.partial_reads
                        if rests_on(f.code, k)
                    ],
                    patient_known=ctx.patient.known,
                    source_url=f"{base}/findings/{f.code.value}",
                    order_context=order,
                ),
                alerts.reason_displays(f.urgency.value, alert),
            )
            for f, offered in zip(findings, tests, strict=True)
        ]

    cards = render([snapshot.link] if snapshot else [])
    if store is not None and (cards or gate.kept_back):
        client = _client_id(caller)
        kept = alerts.kept_back_rows(gate, client_id=client, now=now, replay_call=replay_call)
        write = functools.partial(
            _record,
            store,
            settings,
            call,
            client_id=client,
            now=now,
            gate=gate,
            kept=kept,
            replay_call=replay_call,
        )
        if not await _in_log_writer(store, write, cards, snapshot) and snapshot is not None:
            cards = render([])  # its snapshot is not stored: no link to it
            await _in_log_writer(store, write, cards, None)
        _count_cards(cards)
    response = to_json(HookResponse(cards=cards))
    return Outcome(
        response=response,
        body=encode(response),
        service_id=call.service.id,
        patient_id=call.patient_id,
        codes=[c.source.topic.code for c in cards if c.source.topic],
        unavailable=dict(state.unavailable),
        kept_back=[d.code for d in gate.kept_back],
        no_cards=None if cards else no_cards_reason(ctx, settings, thresholds),
    )


async def _in_log_writer(store: Any, fn: Callable[..., bool], *args: Any) -> bool:
    """``fn(*args)`` on the store's log-writer thread (``Store.log_writer``), in this call's
    context (its request id reaches the log lines); any other store: a pool thread."""
    call = functools.partial(contextvars.copy_context().run, fn, *args)
    return await asyncio.get_running_loop().run_in_executor(
        getattr(store, "log_writer", None), call
    )


def _client_id(caller: object) -> str | None:
    issuer = getattr(caller, "issuer", None)
    return str(issuer) if issuer else None


@dataclass(frozen=True, slots=True)
class _PendingSnapshot:
    """A trend snapshot ready to store, and the card link that opens it."""

    row: Any
    link: Link


def _snapshot(
    settings: Settings, ctx: Any, findings: list[Finding], thresholds: Any, now: datetime
) -> _PendingSnapshot | None:
    """The trend snapshot of this evaluation, to be stored with the card log."""
    try:
        payload = snapshots.snapshot_payload(ctx, findings, thresholds)
        token, row = snapshots.new_snapshot(
            payload, ttl_hours=settings.server.trend_link_ttl_hours, now=now
        )
    except Exception:  # the trend view is a convenience: never fail the cards for it
        _log.exception("trend snapshot not saved")
        return None
    link = Link(
        label="Sodium trend and correction band",
        url=f"{settings.server.public_base_url}/trend/{token}",
        type="absolute",
    )
    return _PendingSnapshot(row, link)


def _record(
    store: Any,
    settings: Settings,
    call: HookCall,
    cards: list[Card],
    snapshot: _PendingSnapshot | None,
    *,
    client_id: str | None,
    now: datetime,
    gate: Any = None,
    kept: list[CardLogRow] | None = None,
    replay_call: str | None = None,
) -> bool:
    """Write the card log and the trend snapshot in one transaction, without waiting for the
    disk (``Store.log_session``). False, and logged, when it failed: the cards still reach the
    clinician (feedback on them is kept as for an unknown card)."""
    patient_hash = logs.hash_patient_id(settings.logging.patient_id_salt, call.patient_id)
    rows = [
        CardLogRow(
            card_uuid=card.uuid,
            service_id=call.service.id,
            finding_code=(code := card.source.topic.code if card.source.topic else "unknown"),
            indicator=card.indicator,
            patient_hash=patient_hash,
            client_id=client_id,
            created_at=now,
            **_alert_fields(gate, code, card, replay_call),
        )
        for card in cards
    ]
    rows += kept or []
    try:
        with store.log_session() as s:
            if snapshot is not None:
                if snapshots.purge_due(store, snapshot.row.created_at):
                    snapshots.purge_in(s, snapshot.row.created_at)
                s.add(snapshot.row)
            add_cards(s, rows)
    except Exception:
        _log.exception("card log and trend snapshot not written")
        return False
    return True


def _alert_fields(gate: Any, code: str, card: Card, replay_call: str | None) -> dict[str, Any]:
    """The alert-burden columns of a shown card's log row (``cds_service/alerts``)."""
    decision = gate.decision(code) if gate is not None else None
    return dict(
        why=decision.why if decision else None,
        inputs_digest=decision.inputs_digest if decision else None,
        user_hash=gate.scope.user_hash if gate is not None and gate.scope else None,
        replay_call=replay_call,
        suggestion_ids=tuple(s.uuid for s in card.suggestions if s.uuid),
    )


def _count_cards(cards: list[Card]) -> None:
    for card in cards:
        ops.count_card(card.source.topic.code if card.source.topic else "unknown")
