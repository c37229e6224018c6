"""The trend page's content: the chart (cached per snapshot) and its text alternative."""

from __future__ import annotations

import re
import threading
from collections import OrderedDict
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from cds_service.clinical.findings import ValueName

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


def chart_svg(key: str, payload: dict[str, Any]) -> str:
    """The chart for one snapshot (``key`` = its token hash), rendered once and kept."""
    with _cache_lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    from cds_service.web.chart import render_trend_svg

    svg = _inline(render_trend_svg(payload))
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


def unit_text(unit: str) -> str:
    return _UNIT_TEXT.get(unit, unit)


def when(iso: str | None) -> str:
    if not iso:
        return ""
    return datetime.fromisoformat(iso).strftime("%d %b %Y %H:%M UTC")


def number(v: object) -> str:
    if isinstance(v, float):
        return f"{v:.1f}".rstrip("0").rstrip(".") if v != int(v) else f"{int(v)}"
    return str(v)


@dataclass(frozen=True, slots=True)
class SodiumRow:
    time: str
    value: str
    change: str  # from the episode start, signed
    note: str
    limit: str  # the limit that applies at that time, as text


def sodium_rows(payload: dict[str, Any]) -> list[SodiumRow]:
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
        rows.append(SodiumRow(when(p["time"]), number(p["value"]), change, note, limit))
    return rows


def describe(payload: dict[str, Any]) -> str:
    """One paragraph saying what the chart shows, for screen readers and a quick read."""
    na = payload.get("sodium") or []
    if not na:
        return "No serum sodium results were available for this evaluation."
    values = [float(p["value"]) for p in na]
    parts = [
        f"{len(na)} serum sodium result{'s' if len(na) != 1 else ''} from {when(na[0]['time'])} "
        f"to {when(na[-1]['time'])}, lowest {number(min(values))} and latest "
        f"{number(values[-1])} mmol/L."
    ]
    lim = payload.get("limits") or {}
    if lim.get("episode_start") and lim.get("start_value") is not None:
        parts.append(
            f"The episode starts at {when(lim['episode_start'])} with "
            f"{number(lim['start_value'])} mmol/L; the shaded band shows the allowed rise of "
            f"{number(lim['limit_24h'])} mmol/L in the first 24 hours and "
            f"{number(lim['limit_48h'])} mmol/L in 48 hours."
        )
    markers = payload.get("markers") or []
    if markers:
        parts.append(
            "Markers: "
            + "; ".join(
                f"{m['label']} {number(m['value'])} {unit_text(m['unit'])} at {when(m['time'])}"
                for m in markers
            )
            + "."
        )
    starts = payload.get("starts") or []
    if starts:
        parts.append(
            "Vertical lines: "
            + "; ".join(f"{s['label']} at {when(s['time'])}" for s in starts)
            + "."
        )
    return " ".join(parts)


def value_label(name: str) -> str:
    return _VALUE_LABELS.get(name, name.replace("_", " "))
