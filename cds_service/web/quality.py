"""The quality page: alert burden and feedback per finding code and week, for the quality team.

- ``GET /quality``: per finding code a chart (server-side SVG by matplotlib, readable without
  JavaScript) of the findings evaluated each week, split into shown, suppressed and silent,
  with the acceptance rate written over each bar, and beside it the same figures as a table;
  filters by date range and service in a plain GET form; replay traffic left out unless asked.
- ``GET /quality.csv`` and ``GET /quality.json``: the same figures as exports.
- ``GET /quality/calls/{call id}``: what one ``tonicity replay`` call logged (finding, action,
  why), so that replay can check a silent service against the log.

Authentication is that of the CDS Hooks endpoints: when ``auth.required`` is true every one of
these needs a client JWT that verifies (``aud`` = the page's URL without its query, a fresh
``jti``); without one the answer is 401. In a local trial they are open. The page is off (404)
when ``alerts.quality_page`` is false. The figures are those of ``tonicity feedback-report``
(``store/report.py``).
"""

from __future__ import annotations

import io
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, JSONResponse, Response
from markupsafe import Markup
from sqlalchemy import select
from starlette.concurrency import run_in_threadpool

from cds_service.errors import UserError
from cds_service.store.report import FeedbackReport, FindingFeedback, feedback_report, parse_filter
from cds_service.store.schema import CardLog
from cds_service.web import pages

#: Most recent weeks drawn per chart (the table always lists them all).
CHART_WEEKS = 16

_HEADERS = {
    "Content-Security-Policy": (
        "default-src 'none'; style-src 'self' 'unsafe-inline'; img-src 'self' data:; "
        "form-action 'self'; base-uri 'none'"
    ),
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
    "X-Robots-Tag": "noindex",
}

# Colours of the three kinds of evaluation (text on the page names each; colour never alone).
SHOWN = "#0b5d5e"
SUPPRESSED = "#c9b48a"
SILENT = "#5b3a6e"


def _problem(status: int, message: str, headers: dict[str, str] | None = None) -> JSONResponse:
    code = {401: "login", 404: "not-found"}.get(status, "invalid")
    body = {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": code, "diagnostics": message}],
    }
    return JSONResponse(body, status_code=status, headers=headers)


async def _guard(request: Request) -> JSONResponse | None:
    """None when the caller may read the figures, else the answer to give."""
    from cds_service.hooks.auth import AuthError

    state = request.app.state
    alert = getattr(state, "alert_settings", None)
    if alert is not None and not alert.quality_page:
        return _problem(404, "the quality page is switched off (alerts.quality_page)")
    settings = state.settings
    authenticator = getattr(state, "authenticator", None)
    if authenticator is None:
        return _problem(401, "authentication is not available") if settings.auth.required else None
    endpoint = f"{settings.server.public_base_url}{request.url.path}"
    try:
        await authenticator.authenticate(request.headers.get("authorization"), endpoint)
    except AuthError as exc:
        return _problem(401, f"authentication failed: {exc.reason}", {"WWW-Authenticate": "Bearer"})
    return None


async def _guarded_report(request: Request) -> FeedbackReport | Response:
    """The report for the request's filters, or the refusal to answer with."""
    refused = await _guard(request)
    if refused is not None:
        return refused
    try:
        return await run_in_threadpool(_report, request)
    except UserError as exc:
        return _problem(400, str(exc))


def _report(request: Request) -> FeedbackReport:
    q = request.query_params
    flt = parse_filter(
        q.get("since"), q.get("until"), q.get("service"), q.get("replay") in ("1", "true", "on")
    )
    return feedback_report(request.app.state.store, flt)


def chart_svg(code: str, weeks: list[FindingFeedback]) -> str:
    """One finding's weekly bars (shown, suppressed, silent stacked), acceptance rate above."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    from cds_service.web.chart import GRID, INK, _lock

    weeks = weeks[-CHART_WEEKS:]
    labels = [w.week[5:] if w.week else "" for w in weeks]  # MM-DD of the Monday
    x = list(range(len(weeks)))
    with (
        _lock,
        matplotlib.rc_context(
            {
                "svg.fonttype": "none",
                "svg.hashsalt": f"quality-{code}",
                "font.family": "DejaVu Sans",
                "font.size": 11,
                "axes.edgecolor": INK,
                "axes.labelcolor": INK,
                "xtick.color": INK,
                "ytick.color": INK,
            }
        ),
    ):
        fig = Figure(figsize=(5.6, 3.0), dpi=100)  # drawn at the size it is shown
        fig.patch.set_facecolor("white")
        ax = fig.add_subplot()
        ax.set_facecolor("#fffdf8")
        shown = [w.shown for w in weeks]
        suppressed = [w.suppressed for w in weeks]
        silent = [w.silent for w in weeks]
        ax.bar(x, shown, color=SHOWN, label="Shown", gid="bar-shown")
        ax.bar(
            x,
            suppressed,
            bottom=shown,
            color=SUPPRESSED,
            label="Suppressed",
            hatch="//",
            edgecolor="#8a7550",
            linewidth=0,
            gid="bar-suppressed",
        )
        base = [a + b for a, b in zip(shown, suppressed, strict=True)]
        ax.bar(
            x,
            silent,
            bottom=base,
            color=SILENT,
            label="Silent",
            hatch="..",
            edgecolor="#ffffff",
            linewidth=0,
            gid="bar-silent",
        )
        top = max((w.evaluated for w in weeks), default=0) or 1
        for i, w in enumerate(weeks):
            rate = w.acceptance_rate
            text = "–" if rate is None else f"{100 * rate:.0f}%"
            ax.text(
                i, w.evaluated + top * 0.03, text, ha="center", va="bottom", fontsize=9, color=INK
            )
        ax.set_ylim(0, top * 1.22)
        ax.set_xticks(x, labels)
        ax.set_xlim(-0.7, max(len(weeks), 4) - 0.3)
        ax.set_xlabel("Week starting (month-day, UTC)")
        ax.set_ylabel("Findings evaluated")
        ax.yaxis.get_major_locator().set_params(integer=True)
        ax.grid(True, axis="y", color=GRID, linewidth=0.6)
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.legend(
            loc="upper left",
            bbox_to_anchor=(1.0, 1.0),
            fontsize=10,
            frameon=False,
            title="Over each bar:\n% accepted",
            title_fontsize=9,
        )
        fig.subplots_adjust(left=0.12, right=0.72, top=0.95, bottom=0.2)
        out = io.StringIO()
        fig.savefig(out, format="svg", metadata={"Date": None, "Creator": "Tonicity"})
    svg = out.getvalue()
    return svg[svg.index("<svg") :]  # inline: no XML prolog or doctype inside HTML


def _describe(f: FindingFeedback) -> str:
    rate = "no card shown" if f.acceptance_rate is None else f"{100 * f.acceptance_rate:.0f}%"
    return (
        f"{f.finding_code}: {f.evaluated} evaluated, {f.shown} shown, {f.suppressed} "
        f"suppressed, {f.silent} silent; {f.accepted} accepted, {f.overridden} overridden; "
        f"acceptance {rate}."
    )


def _html(report: FeedbackReport, request: Request) -> str:
    from cds_service.hooks.registry import SERVICES

    q = request.query_params
    blocks = []
    for total in report.findings:
        weeks = [w for w in report.weeks if w.finding_code == total.finding_code]
        blocks.append(
            {
                "total": total,
                "weeks": weeks,
                "svg": Markup(chart_svg(total.finding_code, weeks)),  # noqa: S704 - our numbers
                "description": _describe(total),
            }
        )
    query = str(request.url.query)
    return pages.render(
        "quality.html",
        report=report,
        blocks=blocks,
        services=sorted(SERVICES),
        since=q.get("since", ""),
        until=q.get("until", ""),
        service=q.get("service", ""),
        replay=q.get("replay") in ("1", "true", "on"),
        query=f"?{query}" if query else "",
        summary=_filter_text(report),
    )


def _filter_text(report: FeedbackReport) -> str:
    return report.to_text().splitlines()[0] if report.findings else ""


def create_router() -> APIRouter:
    router = APIRouter(include_in_schema=False)

    @router.get("/quality", response_class=HTMLResponse)
    async def quality_page(request: Request) -> Response:
        report = await _guarded_report(request)
        if not isinstance(report, FeedbackReport):
            return report
        html = await run_in_threadpool(_html, report, request)
        return HTMLResponse(html, headers=_HEADERS)

    @router.get("/quality.json")
    async def quality_json(request: Request) -> Response:
        report = await _guarded_report(request)
        if not isinstance(report, FeedbackReport):
            return report
        return JSONResponse(report.to_dict(), headers={"Cache-Control": "no-store"})

    @router.get("/quality.csv")
    async def quality_csv(request: Request) -> Response:
        report = await _guarded_report(request)
        if not isinstance(report, FeedbackReport):
            return report
        return Response(
            report.to_csv(),
            media_type="text/csv; charset=utf-8",
            headers={
                "Cache-Control": "no-store",
                "Content-Disposition": 'attachment; filename="tonicity-quality.csv"',
            },
        )

    @router.get("/quality/calls/{call_id}")
    async def replay_call(call_id: str, request: Request) -> Response:
        from cds_service.alerts.live import REPLAY_CALL

        refused = await _guard(request)
        if refused is not None:
            return refused
        if not REPLAY_CALL.fullmatch(call_id):
            return _problem(400, "a replay call id is 1-64 letters, digits or -")
        # An unknown id and a call that logged nothing (no finding) read the same: no rows.
        decisions = await run_in_threadpool(_call_decisions, request.app.state.store, call_id)
        return JSONResponse({"call": call_id, "decisions": decisions})

    return router


def _call_decisions(store: Any, call_id: str) -> list[dict[str, str]]:
    query = (
        select(
            CardLog.service_id, CardLog.finding_code, CardLog.indicator, CardLog.action, CardLog.why
        )
        .where(CardLog.replay_call == call_id)
        .order_by(CardLog.id)
    )
    with store.session() as s:
        rows = s.execute(query).all()
    return [
        {
            k: v
            for k, v in zip(("service", "code", "indicator", "action", "why"), r, strict=True)
            if v
        }
        for r in rows
    ]
