"""Small server-side SVG charts for the rehearsal report (no script, readable when printed).

Each function returns one ``<svg>`` element with a ``<title>`` and ``role="img"``; the report
puts a text table with the same numbers under each chart.
"""

from __future__ import annotations

from collections.abc import Sequence
from html import escape

INK = "#1f2933"
GRID = "#d5dbe1"
COLOURS = {"critical": "#b42318", "warning": "#b54708", "info": "#1d5fa8", "other": "#5b6b7b"}
FONT = 'font-family="system-ui, sans-serif"'


def _svg(width: int, height: int, title: str, body: list[str]) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}" {FONT} font-size="13">'
        f"<title>{escape(title)}</title>{''.join(body)}</svg>"
    )


def _nice(top: float) -> float:
    """A round axis maximum at or above ``top``."""
    if top <= 0:
        return 1.0
    step = 10 ** len(str(int(top))) / 10
    for m in (1, 2, 2.5, 5, 10):
        if m * step >= top:
            return m * step
    return 10 * step


def _fmt(v: float) -> str:
    return f"{v:,.0f}" if v >= 100 or v == int(v) else f"{v:,.1f}" if v >= 10 else f"{v:.2f}"


def hbars(rows: Sequence[tuple[str, float, str]], title: str, unit: str) -> str:
    """Horizontal bars: (label, value, colour key) per row, value printed at the bar's end."""
    label_w, bar_w, row_h = 330, 380, 24
    height = 40 + row_h * len(rows) + 30
    top = _nice(max((v for _, v, _ in rows), default=0))
    body = [f'<text x="0" y="18" font-weight="600" fill="{INK}">{escape(title)}</text>']
    for i in range(5):
        x = label_w + bar_w * i / 4
        body.append(f'<line x1="{x:.1f}" y1="30" x2="{x:.1f}" y2="{height - 26}" stroke="{GRID}"/>')
        body.append(
            f'<text x="{x:.1f}" y="{height - 10}" text-anchor="middle" fill="{INK}">'
            f"{_fmt(top * i / 4)}</text>"
        )
    for i, (label, value, colour) in enumerate(rows):
        y = 34 + i * row_h
        w = bar_w * value / top if top else 0
        body.append(
            f'<text x="{label_w - 8}" y="{y + 15}" text-anchor="end" fill="{INK}">'
            f"{escape(label)}</text>"
        )
        body.append(
            f'<rect x="{label_w}" y="{y + 3}" width="{max(w, 1):.1f}" height="{row_h - 8}" '
            f'fill="{COLOURS.get(colour, COLOURS["other"])}"/>'
        )
        body.append(
            f'<text x="{label_w + w + 6:.1f}" y="{y + 15}" fill="{INK}">{_fmt(value)}</text>'
        )
    body.append(
        f'<text x="{label_w + bar_w / 2}" y="{height + 4}" text-anchor="middle" '
        f'fill="{INK}" font-size="12">{escape(unit)}</text>'
    )
    return _svg(label_w + bar_w + 70, height + 8, title, body)


def daily(values: Sequence[int], title: str, marks: Sequence[tuple[str, float]]) -> str:
    """Cards per day as columns, with horizontal reference lines (median, 95th percentile)."""
    left, width, height, base = 50, 700, 220, 180
    top = _nice(max([*values, *(v for _, v in marks), 1]))
    n = max(len(values), 1)
    col = width / n
    body = [f'<text x="0" y="18" font-weight="600" fill="{INK}">{escape(title)}</text>']
    for i in range(5):
        y = base - (base - 36) * i / 4
        body.append(
            f'<line x1="{left}" y1="{y:.1f}" x2="{left + width}" y2="{y:.1f}" stroke="{GRID}"/>'
        )
        body.append(
            f'<text x="{left - 6}" y="{y + 4:.1f}" text-anchor="end" fill="{INK}">'
            f"{_fmt(top * i / 4)}</text>"
        )
    for i, v in enumerate(values):
        h = (base - 36) * v / top
        body.append(
            f'<rect x="{left + i * col:.1f}" y="{base - h:.1f}" '
            f'width="{max(col - 1, 0.5):.1f}" height="{h:.1f}" fill="{COLOURS["info"]}"/>'
        )
    dash = ("6 3", "2 3")
    for (label, v), d in zip(marks, dash, strict=False):
        y = base - (base - 36) * v / top
        body.append(
            f'<line x1="{left}" y1="{y:.1f}" x2="{left + width}" y2="{y:.1f}" '
            f'stroke="{INK}" stroke-width="1.5" stroke-dasharray="{d}"/>'
        )
        body.append(
            f'<text x="{left + width + 6}" y="{y + 4:.1f}" fill="{INK}">'
            f"{escape(label)} {_fmt(v)}</text>"
        )
    for day in range(0, n, 7):
        x = left + day * col
        body.append(
            f'<text x="{x:.1f}" y="{base + 18}" fill="{INK}" font-size="12">day {day + 1}</text>'
        )
    return _svg(left + width + 150, height, title, body)


def cumulative(series: Sequence[tuple[str, Sequence[int], int, str]], title: str) -> str:
    """Share of episodes with the test done by each hour: a step line per series
    (label, episodes done by hour 0, 1, 2 ..., number of episodes, colour key)."""
    left, width, base, top_y = 50, 600, 200, 36
    hours = max((len(done) - 1 for _, done, _, _ in series), default=1) or 1
    body = [f'<text x="0" y="18" font-weight="600" fill="{INK}">{escape(title)}</text>']
    for i in range(5):
        y = base - (base - top_y) * i / 4
        body.append(
            f'<line x1="{left}" y1="{y:.1f}" x2="{left + width}" y2="{y:.1f}" stroke="{GRID}"/>'
        )
        body.append(
            f'<text x="{left - 6}" y="{y + 4:.1f}" text-anchor="end" fill="{INK}">{25 * i} %</text>'
        )
    for h in range(0, hours + 1, 12):
        x = left + width * h / hours
        body.append(
            f'<text x="{x:.1f}" y="{base + 18}" text-anchor="middle" fill="{INK}" '
            f'font-size="12">{h} h</text>'
        )
    legend_y = top_y
    for label, done, n, colour in series:
        points, last_y = [], base
        for h, count in enumerate(done):
            x = left + width * h / hours
            y = base - (base - top_y) * count / max(n, 1)
            points += [f"{x:.1f},{last_y:.1f}", f"{x:.1f},{y:.1f}"]
            last_y = y
        stroke = COLOURS.get(colour, COLOURS["other"])
        body.append(
            f'<polyline fill="none" stroke="{stroke}" stroke-width="2.5" '
            f'points="{" ".join(points)}"/>'
        )
        body.append(
            f'<rect x="{left + width + 14}" y="{legend_y - 9}" width="14" height="4" '
            f'fill="{stroke}"/>'
        )
        body.append(
            f'<text x="{left + width + 34}" y="{legend_y - 3}" fill="{INK}">{escape(label)}</text>'
        )
        legend_y += 22
    body.append(
        f'<text x="{left + width / 2}" y="{base + 36}" text-anchor="middle" '
        f'fill="{INK}" font-size="12">hours after the first low sodium</text>'
    )
    return _svg(left + width + 200, base + 44, title, body)
