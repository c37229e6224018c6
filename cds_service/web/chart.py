"""The sodium trend chart: a snapshot payload drawn as SVG by matplotlib (Agg, SVG output).

matplotlib is imported on first use, not when the app starts. Every drawn thing a test or a
stylesheet may look for carries an SVG id (matplotlib ``gid``):

- ``sodium-point-<i>``: one group per sodium result drawn, in time order (``i`` indexes the
  payload's results, so with the episode view the first ids may be absent);
- ``sodium-over-<i>``: a ring around a result above the correction limit at its time;
- ``limit-band``: the shaded correction-limit band from the episode start;
- ``limit-24h`` / ``limit-48h``: the limit lines (start value + limit);
- ``marker-<kind>-<i>``: measured osmolality and urine studies (kind as in the payload);
- ``start-<i>``: vertical line at a medication or infusion start or a draft order.
"""

from __future__ import annotations

import io
import math
import threading
from datetime import UTC, datetime, timedelta, tzinfo
from typing import Any

# Palette shared with the stylesheet (cds_service/web/static/tonicity.css).
INK = "#1d2b2a"
TEAL = "#0b5d5e"
SAND = "#e9dcc3"
CLAY = "#a4471f"
PLUM = "#5b3a6e"
GRID = "#d6d0c4"

#: Marker strip rows: shape, colour and the short row label (with its unit).
_MARKER_STYLE = {
    "osmolality": ("^", PLUM, "Serum osm (mOsm/kg)"),
    "urine_osmolality": ("v", "#8a5a00", "Urine osm (mOsm/kg)"),
    "urine_sodium": ("D", "#3d5a80", "Urine Na (mmol/L)"),
}

_lock = threading.Lock()  # pyplot-free, but font cache and rcParams are process-wide


def _t(s: str) -> datetime:
    return datetime.fromisoformat(s)


def _num(t: datetime) -> float:
    """Date as matplotlib's day number (annotations do not convert units themselves)."""
    from matplotlib.dates import date2num

    return float(date2num(t))


def render_trend_svg(payload: dict[str, Any], tz: tzinfo = UTC, view: str = "episode") -> str:
    """Return a standalone SVG document (text) of the payload's sodium trend.

    ``tz`` is the institution's time zone for the time axis (the payload is in UTC);
    ``view`` is ``"episode"`` (the default: from the current episode's start to now) or
    ``"stay"`` (every result sent).
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.dates as mdates
    from matplotlib.figure import Figure

    with (
        _lock,
        matplotlib.rc_context(
            {
                "svg.fonttype": "none",  # text stays text: searchable, scalable
                "svg.hashsalt": "tonicity",  # stable ids between renders
                "font.family": "DejaVu Sans",
                "font.size": 10,
                "axes.edgecolor": INK,
                "axes.labelcolor": INK,
                "xtick.color": INK,
                "ytick.color": INK,
            }
        ),
    ):
        markers = payload.get("markers") or []
        fig = Figure(figsize=(8.6, 6.2 if markers else 5.4), dpi=100)
        fig.patch.set_facecolor("white")
        if markers:
            ax, strip = fig.subplots(
                2, 1, sharex=True, gridspec_kw={"height_ratios": [4, 1.15], "hspace": 0.08}
            )
        else:
            ax, strip = fig.add_subplot(), None
        ax.set_facecolor("#fffdf8")
        lo, hi = window(payload, view)
        _draw(ax, payload, lo, hi)
        _draw_starts(ax, payload.get("starts") or [], lo, labels=True)
        bottom = ax
        if strip is not None:
            _draw_markers(strip, [m for m in markers if lo <= _t(m["time"]) <= hi])
            _draw_starts(strip, payload.get("starts") or [], lo, labels=False)
            bottom = strip
        ax.set_xlim(lo, hi)
        _time_axis(bottom, lo, hi, mdates, tz)
        bottom.set_xlabel(f"Time ({zone_name(tz)})")
        ax.set_ylabel("Serum sodium (mmol/L)")
        ax.grid(True, color=GRID, linewidth=0.6)
        _legend_extras(ax, payload, lo, hi)
        # The legend sits under the chart, full width and at reading size, so that it never
        # narrows the plot or gets cut at the right edge.
        handles, labels = ax.get_legend_handles_labels()
        fig.legend(
            handles,
            labels,
            loc="lower left",
            bbox_to_anchor=(0.02, 0.0),
            ncol=2,
            fontsize=10,
            frameon=False,
            columnspacing=2.0,
        )
        rows = (len(labels) + 1) // 2
        height = fig.get_figheight()
        legend_h = (0.22 * rows + 0.15) / height  # inches per legend row, as a fraction
        fig.subplots_adjust(
            left=0.17 if markers else 0.1, right=0.98, top=0.97, bottom=legend_h + 0.65 / height
        )
        out = io.StringIO()
        fig.savefig(out, format="svg", metadata={"Date": None, "Creator": "Tonicity"})
    return out.getvalue()


def _draw(ax: Any, payload: dict[str, Any], lo: datetime, hi: datetime) -> None:
    sodium = payload.get("sodium") or []
    shown = [(i, p) for i, p in enumerate(sodium) if lo <= _t(p["time"]) <= hi]
    times = [_t(p["time"]) for _, p in shown]
    values = [float(p["value"]) for _, p in shown]
    if times:
        ax.plot(times, values, color=TEAL, linewidth=1.6, zorder=3, label="Serum sodium")
    size = 7 if len(times) <= 30 else 5 if len(times) <= 80 else 3.5  # long stays stay legible
    over = over_limit(payload)
    for (i, p), t, v in zip(shown, times, values, strict=True):
        method = point_method(p)
        hollow = "preliminary" in (p.get("note") or "")
        shape, colour = _METHOD_STYLE[method]
        ax.plot(
            [t],
            [v],
            linestyle="none",
            marker=shape,
            markersize=size,
            markeredgewidth=1.6 if size > 5 else 1.0,
            markeredgecolor=colour,
            markerfacecolor="white" if hollow else colour,
            zorder=4,
            gid=f"sodium-point-{i}",
        )
        if i in over:  # a ring around every result above the limit that applies to it
            ax.plot(
                [t],
                [v],
                linestyle="none",
                marker="o",
                markersize=size + 7,
                markeredgewidth=2.0,
                markeredgecolor=CLAY,
                markerfacecolor="none",
                zorder=5,
                gid=f"sodium-over-{i}",
            )
    _draw_band(ax, payload.get("limits"), hi)
    if values:
        low, high = min(values), max(values)
        limits = payload.get("limits") or {}
        if limits.get("start_value") is not None:
            high = max(high, float(limits["start_value"]) + float(limits["limit_48h"]))
        ax.set_ylim(low - 4, high + 4)


#: Point shape and colour by how the sodium was measured: a laboratory analyser on serum or
#: plasma, or a blood-gas / point-of-care analyser on whole blood (direct ISE).
_METHOD_STYLE = {"laboratory": ("o", TEAL), "whole blood": ("s", "#3d5a80")}


def point_method(point: dict[str, Any]) -> str:
    return "whole blood" if "whole blood" in (point.get("note") or "") else "laboratory"


def over_limit(payload: dict[str, Any]) -> set[int]:
    """Indices of the sodium results whose rise from the episode start exceeds the limit that
    applies at their time (the 24-h limit in the first 24 hours, the 48-h limit up to 48)."""
    lim = payload.get("limits") or {}
    if not lim.get("episode_start") or lim.get("start_value") is None:
        return set()
    t0, v0 = _t(lim["episode_start"]), float(lim["start_value"])
    out = set()
    for i, p in enumerate(payload.get("sodium") or []):
        t = _t(p["time"])
        if t < t0:
            continue
        rise = float(p["value"]) - v0
        if t <= t0 + timedelta(hours=24):
            limit = float(lim["limit_24h"])
        elif t <= t0 + timedelta(hours=48):
            limit = float(lim["limit_48h"])
        else:
            continue
        if rise > limit:
            out.add(i)
    return out


def _legend_extras(ax: Any, payload: dict[str, Any], lo: datetime, hi: datetime) -> None:
    """Legend entries for point shapes and highlights, when the drawn window has them."""
    sodium = [p for p in payload.get("sodium") or [] if lo <= _t(p["time"]) <= hi]
    methods = {point_method(p) for p in sodium}
    if len(methods) > 1 or "whole blood" in methods:
        for method in ("laboratory", "whole blood"):
            shape, colour = _METHOD_STYLE[method]
            label = (
                "Laboratory (serum/plasma)"
                if method == "laboratory"
                else ("Whole blood (blood gas / point of care)")
            )
            ax.plot([], [], linestyle="none", marker=shape, color=colour, label=label)
    if any("preliminary" in (p.get("note") or "") for p in sodium):
        ax.plot(
            [],
            [],
            linestyle="none",
            marker="o",
            markerfacecolor="white",
            markeredgecolor=TEAL,
            label="Preliminary result",
        )
    if over_limit(payload):
        ax.plot(
            [],
            [],
            linestyle="none",
            marker="o",
            markersize=11,
            markerfacecolor="none",
            markeredgecolor=CLAY,
            markeredgewidth=2.0,
            label="Above the correction limit",
        )


def _draw_band(ax: Any, limits: dict[str, Any] | None, hi: datetime) -> None:
    """The allowed rise from the episode start, drawn up to the window's right edge (now):
    the band does not run on into an empty future."""
    if not limits or not limits.get("episode_start") or limits.get("start_value") is None:
        return
    t0 = _t(limits["episode_start"])
    if t0 >= hi:
        return
    v0 = float(limits["start_value"])
    l24, l48 = float(limits["limit_24h"]), float(limits["limit_48h"])
    t24, t48 = min(t0 + timedelta(hours=24), hi), min(t0 + timedelta(hours=48), hi)
    ax.fill_between(
        [t0, t24, t24, t48],
        [v0, v0, v0, v0],
        [v0 + l24, v0 + l24, v0 + l48, v0 + l48],
        color=SAND,
        alpha=0.75,
        linewidth=0,
        zorder=1,
        gid="limit-band",
        label="Allowed rise from episode start",
    )
    for hours, (a, b), limit, style in ((24, (t0, t24), l24, "--"), (48, (t24, t48), l48, ":")):
        ax.plot(
            [a, b],
            [v0 + limit] * 2,
            color=CLAY,
            linestyle=style,
            linewidth=1.3,
            zorder=2,
            gid=f"limit-{hours}h",
            label=f"{hours}-h limit (+{limit:g} mmol/L)",
        )
    ax.axvline(t0, color=CLAY, linewidth=0.8, alpha=0.6, zorder=1)


def _draw_markers(strip: Any, markers: list[dict[str, Any]]) -> None:
    """Osmolality and urine studies in a strip under the sodium axes, one row per test."""
    rows = list(_MARKER_STYLE)
    rows += sorted({str(m.get("kind")) for m in markers} - set(rows))
    names = {k: style[2] for k, style in _MARKER_STYLE.items()}
    for i, m in enumerate(markers):
        kind = str(m.get("kind", "other"))
        shape, colour, _ = _MARKER_STYLE.get(kind, ("P", INK, ""))
        names.setdefault(kind, f"{m.get('label', kind)} ({m.get('unit', '')})")
        y = rows.index(kind)
        strip.plot(
            [_t(m["time"])],
            [y],
            marker=shape,
            color=colour,
            markersize=8,
            linestyle="none",
            zorder=5,
            gid=f"marker-{kind}-{i}",
        )
        strip.annotate(
            f"{float(m['value']):g}",
            (_num(_t(m["time"])), y),
            xytext=(7, -3),
            textcoords="offset points",
            fontsize=8,
            color=colour,
        )
    strip.set_yticks(
        range(len(rows)), [names.get(k, k.replace("_", " ")) for k in rows], fontsize=7.5
    )
    strip.set_ylim(len(rows) - 0.4, -0.6)
    strip.set_facecolor("#fbf8f1")
    strip.grid(True, axis="x", color=GRID, linewidth=0.6)


def window(payload: dict[str, Any], view: str = "episode") -> tuple[datetime, datetime]:
    """The time range drawn, with a margin.

    ``"episode"``: from the current episode's start (when there is one) to the evaluation
    time, so that a long stay does not squeeze today's limit band into a sliver; earlier
    results stay in the table. ``"stay"``: every result, marker and draft. Either way the
    right edge is the evaluation time at most: nothing is drawn for an empty future.
    Medications started before the window are named at its left edge ("started earlier").
    """
    now = _t(payload["now"]) if payload.get("now") else None
    times = [_t(p["time"]) for p in payload.get("sodium") or []]
    times += [_t(m["time"]) for m in payload.get("markers") or []]
    times += [_t(s["time"]) for s in payload.get("starts") or [] if s.get("kind") == "draft"]
    lim = payload.get("limits") or {}
    start = _t(lim["episode_start"]) if lim.get("episode_start") else None
    if view == "episode" and start is not None:
        times = [t for t in times if t >= start] + [start]
    if not times:
        end = now or datetime.now(UTC)
        times = [end - timedelta(hours=24), end]
    lo, hi = min(times), max(times)
    if now is not None:
        hi = max(min(hi, now), lo)
    margin = max((hi - lo) * 0.04, timedelta(hours=2))
    return lo - margin, hi + margin


def hidden_before(payload: dict[str, Any], view: str = "episode") -> int:
    """How many sodium results lie left of the drawn window (they are in the table)."""
    lo = window(payload, view)[0]
    return sum(1 for p in payload.get("sodium") or [] if _t(p["time"]) < lo)


def zone_name(tz: tzinfo) -> str:
    return "UTC" if tz is UTC else str(getattr(tz, "key", None) or tz)


def _time_axis(ax: Any, lo: datetime, hi: datetime, mdates: Any, tz: tzinfo) -> None:
    """Evenly spaced ticks (no crowding at month ends), about six of them, in ``tz``."""
    hours = (hi - lo).total_seconds() / 3600
    if hours <= 96:
        step = next((h for h in (1, 2, 3, 4, 6, 12, 24) if hours / h <= 8), 24)
        ax.xaxis.set_major_locator(mdates.HourLocator(byhour=range(0, 24, step), tz=tz))
        ax.xaxis.set_major_formatter(mdates.DateFormatter("%d %b\n%H:%M", tz=tz))
    else:
        days = max(1, math.ceil(hours / 24 / 7))
        ax.xaxis.set_major_locator(mdates.DayLocator(interval=days, tz=tz))
        ax.xaxis.set_major_formatter(mdates.DateFormatter("%d %b", tz=tz))


def _short(label: str) -> str:
    text = label.split(",")[0].strip()
    return text if len(text) <= 30 else text[:29] + "…"


def _draw_starts(ax: Any, starts: list[dict[str, Any]], lo: datetime, *, labels: bool) -> None:
    """Vertical lines at medication or infusion starts (and drafts, at evaluation time).

    Starts within an hour of each other share one label; starts before the drawn window are
    listed at its left edge. Only the sodium axes carry ids, legend entry and labels; the
    marker strip repeats the lines as plain guides.
    """
    trans = ax.get_xaxis_transform()
    earlier: list[str] = []
    groups: list[tuple[datetime, list[str], bool]] = []
    for i, s in enumerate(starts):
        t = _t(s["time"])
        if t < lo:
            earlier.append(f"{_short(s.get('label', ''))} ({t:%d %b})")
            if labels:  # keep one id per start: a tick on the left edge
                ax.plot(
                    [lo],
                    [0.985],
                    transform=trans,
                    marker=">",
                    color=CLAY,
                    markersize=5,
                    linestyle="none",
                    gid=f"start-{i}",
                    clip_on=False,
                )
            continue
        associated = bool(s.get("associated"))
        ax.axvline(
            t,
            color=CLAY if associated else "#6b6b6b",
            linewidth=1.1,
            linestyle="-.",
            zorder=2,
            gid=f"start-{i}" if labels else None,
            label="Medication or infusion start" if labels and not groups else None,
        )
        if groups and t - groups[-1][0] <= timedelta(hours=1):
            groups[-1][1].append(_short(s.get("label", "")))
        else:
            groups.append((t, [_short(s.get("label", ""))], associated))
    if not labels:
        return
    for t, names, associated in groups:
        ax.text(
            _num(t),
            0.98,
            " " + " + ".join(names),
            transform=trans,
            rotation=90,
            va="top",
            ha="right",
            fontsize=7.5,
            color=CLAY if associated else "#6b6b6b",
        )
    if earlier:
        ax.text(
            0.01,
            0.96,
            "Started earlier: " + "; ".join(earlier),
            transform=ax.transAxes,
            va="top",
            ha="left",
            fontsize=7.5,
            color=CLAY,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5},
        )
