"""The trend page's content: the chart (cached per snapshot) and its text alternative."""

from __future__ import annotations

import html
import re
import threading
from collections import OrderedDict
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta, tzinfo
from typing import Any

from cds_service.clinical.findings import ValueName
from cds_service.web.chart import hidden_before, over_limit, point_method, zone_name

__all__ = ["hidden_before", "zone_name"]  # re-exported for the routes

CACHE_SIZE = 64

_cache: OrderedDict[str, str] = OrderedDict()
_cache_lock = threading.Lock()

_VALUE_LABELS: dict[str, str] = {
    ValueName.SERUM_SODIUM: "Serum sodium",
    ValueName.MEASURED_OSMOLALITY: "Measured osmolality",
    ValueName.CALCULATED_OSMOLALITY: "Calculated osmolality",
    ValueName.OSMOLAL_GAP: "Osmolal gap",
    ValueName.CORRECTED_SODIUM_KATZ: "Glucose-corrected sodium (Katz)",
    ValueName.CORRECTED_SODIUM_HILLIER: "Glucose-corrected sodium (Hillier)",
    ValueName.URINE_OSMOLALITY: "Urine osmolality",
    ValueName.URINE_SODIUM: "Urine sodium",
    ValueName.URINE_SERUM_ELECTROLYTE_RATIO: "Urine/serum electrolyte ratio",
    ValueName.SODIUM_CHANGE_24H: "Sodium change in 24 h",
    ValueName.SODIUM_CHANGE_48H: "Sodium change in 48 h",
    ValueName.CORRECTION_LIMIT_24H: "Correction limit for 24 h",
    ValueName.TOTAL_BODY_WATER: "Total body water",
    ValueName.DELTA_SODIUM_PER_LITER: "Expected sodium change per litre",
    ValueName.MAX_VOLUME_24H: "Maximum volume in 24 h",
    ValueName.SEVERITY: "Severity",
}

#: UCUM codes as a clinician reads them.
_UNIT_TEXT = {"mosm/kg": "mOsm/kg", "1": "", "m[IU]/L": "mIU/L", "ug/dL": "µg/dL"}


def chart_svg(key: str, payload: dict[str, Any], tz: tzinfo = UTC, view: str = "episode") -> str:
    """The chart for one snapshot (``key`` = its token hash), rendered once per time zone and
    view and kept."""
    key = f"{key}|{zone_name(tz)}|{view}"
    with _cache_lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    from cds_service.web.chart import render_trend_svg

    svg = _point_titles(_inline(render_trend_svg(payload, tz, view)), payload, tz)
    with _cache_lock:
        _cache[key] = svg
        while len(_cache) > CACHE_SIZE:
            _cache.popitem(last=False)
    return svg


def _inline(svg: str) -> str:
    """Make a standalone SVG document embeddable: drop prolog, name it for assistive tech."""
    start = svg.find("<svg")
    svg = svg[start:]
    return re.sub(
        r"<svg\b",
        '<svg role="img" aria-labelledby="chart-title" aria-describedby="chart-desc"'
        ' class="trend-chart" focusable="false"',
        svg,
        count=1,
    )


def _point_titles(svg: str, payload: dict[str, Any], tz: tzinfo) -> str:
    """A hover text on every sodium point: value, method, local time and UTC."""
    over = over_limit(payload)
    for i, p in enumerate(payload.get("sodium") or []):
        local, utc = when(p["time"], tz), when(p["time"])
        text = f"Sodium {number(p['value'])} mmol/L, {point_method(p)}"
        if "preliminary" in (p.get("note") or ""):
            text += ", preliminary"
        if i in over:
            text += ", above the correction limit"
        text += f", {local}" + (f" ({utc})" if local != utc else "")
        svg = svg.replace(
            f'<g id="sodium-point-{i}">',
            f'<g id="sodium-point-{i}"><title>{html.escape(text)}</title>',
            1,
        )
    return svg


def unit_text(unit: str) -> str:
    return _UNIT_TEXT.get(unit, unit)


def when(iso: str | None, tz: tzinfo = UTC) -> str:
    """A payload time (UTC, ISO 8601) as a clinician reads it, in ``tz``."""
    if not iso:
        return ""
    t = datetime.fromisoformat(iso).astimezone(tz)
    return t.strftime("%d %b %Y %H:%M ") + (zone_name(tz) if tz is UTC else t.strftime("%Z"))


def number(v: object) -> str:
    if isinstance(v, float):
        return f"{v:.1f}".rstrip("0").rstrip(".") if v != int(v) else f"{int(v)}"
    return str(v)


@dataclass(frozen=True, slots=True)
class SodiumRow:
    time: str  # in the institution's time zone
    utc: str  # the same instant in UTC
    value: str
    change: str  # from the episode start, signed
    note: str
    limit: str  # the limit that applies at that time, as text


def sodium_rows(payload: dict[str, Any], tz: tzinfo = UTC) -> list[SodiumRow]:
    lim = payload.get("limits") or {}
    t0 = datetime.fromisoformat(lim["episode_start"]) if lim.get("episode_start") else None
    v0 = lim.get("start_value")
    rows = []
    for p in payload.get("sodium") or []:
        t = datetime.fromisoformat(p["time"])
        change, limit = "", ""
        if t0 is not None and v0 is not None and t >= t0:
            rise = float(p["value"]) - float(v0)
            change = f"{rise:+g}"
            for hours, key in ((24, "limit_24h"), (48, "limit_48h")):
                if t <= t0 + timedelta(hours=hours):
                    over = " (exceeded)" if rise > float(lim[key]) else ""
                    limit = f"+{number(lim[key])} in {hours} h{over}"
                    break
        note = p.get("note", "")
        rows.append(
            SodiumRow(when(p["time"], tz), when(p["time"]), number(p["value"]), change, note, limit)
        )
    return rows


def describe(payload: dict[str, Any], tz: tzinfo = UTC, view: str = "episode") -> str:
    """One paragraph saying what the chart shows, for screen readers and a quick read."""
    na = payload.get("sodium") or []
    if not na:
        return "No serum sodium results were available for this evaluation."
    values = [float(p["value"]) for p in na]
    parts = [
        f"{len(na)} serum sodium result{'s' if len(na) != 1 else ''} from "
        f"{when(na[0]['time'], tz)} to {when(na[-1]['time'], tz)}, lowest "
        f"{number(min(values))} and latest {number(values[-1])} mmol/L."
    ]
    hidden = hidden_before(payload, view)
    if hidden:
        parts.append(
            f"The chart shows the current episode; {hidden} earlier result"
            f"{'s are' if hidden != 1 else ' is'} in the table below."
        )
    over = over_limit(payload)
    if over:
        parts.append(
            f"{len(over)} result{'s' if len(over) != 1 else ''} rose above the correction "
            "limit that applied at the time (ringed)."
        )
    lim = payload.get("limits") or {}
    if lim.get("episode_start") and lim.get("start_value") is not None:
        parts.append(
            f"The episode starts at {when(lim['episode_start'], tz)} with "
            f"{number(lim['start_value'])} mmol/L; the shaded band shows the allowed rise of "
            f"{number(lim['limit_24h'])} mmol/L in the first 24 hours and "
            f"{number(lim['limit_48h'])} mmol/L in 48 hours."
        )
    markers = payload.get("markers") or []
    if markers:
        parts.append(
            "Markers: "
            + "; ".join(
                f"{m['label']} {number(m['value'])} {unit_text(m['unit'])} at {when(m['time'], tz)}"
                for m in markers
            )
            + "."
        )
    starts = payload.get("starts") or []
    if starts:
        parts.append(
            "Vertical lines: "
            + "; ".join(f"{s['label']} at {when(s['time'], tz)}" for s in starts)
            + "."
        )
    return " ".join(parts)


def value_label(name: str) -> str:
    return _VALUE_LABELS.get(name, name.replace("_", " "))
