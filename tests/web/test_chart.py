"""The trend chart: one SVG point per sodium result, the correction-limit band, markers."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import replace
from datetime import timedelta

from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.clinical.thresholds import load_thresholds
from cds_service.hooks.snapshots import snapshot_payload
from cds_service.web.chart import render_trend_svg, window
from tests.web.conftest import make_context, make_findings

SVG = "{http://www.w3.org/2000/svg}"


def _ids(svg: str) -> list[str]:
    root = ET.fromstring(svg)  # noqa: S314 - our own renderer's output
    return [e.get("id", "") for e in root.iter() if e.get("id")]


def _texts(svg: str) -> str:
    root = ET.fromstring(svg)  # noqa: S314
    return " ".join("".join(e.itertext()) for e in root.iter(f"{SVG}text"))


def _render(sodium=None) -> str:
    ctx = make_context(sodium) if sodium is not None else make_context()
    return render_trend_svg(snapshot_payload(ctx, make_findings(), load_thresholds()))


def test_one_point_per_sodium_result_and_the_band() -> None:
    svg = _render()
    ids = _ids(svg)
    points = [i for i in ids if i.startswith("sodium-point-")]
    assert points == [f"sodium-point-{i}" for i in range(5)]
    assert {"limit-band", "limit-24h", "limit-48h"} <= set(ids)
    assert sorted(i for i in ids if i.startswith("marker-")) == [
        "marker-osmolality-0",
        "marker-urine_osmolality-1",
        "marker-urine_sodium-2",
    ]
    # Hydrochlorothiazide, 3% saline infusion, the D5W draft (paracetamol has no start time).
    assert len([i for i in ids if i.startswith("start-")]) == 3


def test_axes_say_units_and_time_zone() -> None:
    text = _texts(_render())
    assert "Serum sodium (mmol/L)" in text
    assert "Time (UTC)" in text
    assert "Serum sodium and correction limits" in text
    # The fixture's limits (10 and 18 mmol/L from thresholds.toml) are named in the legend.
    th = load_thresholds()
    assert f"24-h limit (+{th.correction_limit_24h:g} mmol/L)" in text
    assert f"48-h limit (+{th.correction_limit_48h:g} mmol/L)" in text


def test_band_reaches_start_value_plus_48h_limit() -> None:
    """The y-axis is stretched to show the top of the band (start + 48-h limit)."""
    svg = _render()
    th = load_thresholds()
    top = 118 + th.correction_limit_48h  # nadir of the fixture + 48-h limit
    labels = [float(t) for t in _texts(svg).split() if t.replace(".", "", 1).isdigit()]
    assert max(labels) >= top


def test_no_sodium_draws_no_points_and_no_band() -> None:
    payload = snapshot_payload(make_context([]), [], load_thresholds())
    ids = _ids(render_trend_svg(payload))
    assert not [i for i in ids if i.startswith("sodium-point-")]
    assert "limit-band" not in ids


series = st.lists(
    st.tuples(
        st.integers(0, 96).map(float),  # hours after the first draw
        st.integers(100, 150).map(float),  # mmol/L
        st.booleans(),
        st.booleans(),
    ),
    min_size=1,
    max_size=10,
    unique_by=lambda r: r[0],
)


@settings(max_examples=12, deadline=None)
@given(sodium=series)
def test_point_count_equals_result_count(sodium) -> None:
    """Law: the chart has exactly one point per sodium result, whatever the series."""
    ids = _ids(_render(sorted(sodium)))
    assert len([i for i in ids if i.startswith("sodium-point-")]) == len(sodium)
    has_low = any(v < load_thresholds().sodium_lower_normal for _, v, _, _ in sodium)
    assert ("limit-band" in ids) == has_low


def test_rendering_is_deterministic() -> None:
    assert _render() == _render()


def test_early_medication_start_is_named_not_stretched_into_view() -> None:
    """A drug started weeks before the first result keeps its id but not the x-range."""
    ctx = make_context()
    early = replace(ctx.medications[0], start=ctx.now - timedelta(days=30))
    ctx = replace(ctx, medications=(early, *ctx.medications[1:]))
    payload = snapshot_payload(ctx, make_findings(), load_thresholds())
    lo, _ = window(payload)
    assert lo > ctx.now - timedelta(days=5)
    svg = render_trend_svg(payload)
    assert len([i for i in _ids(svg) if i.startswith("start-")]) == 3
    assert "Started earlier: Hydrochlorothiazide 25 mg" in _texts(svg)
