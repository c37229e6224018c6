"""The trend chart: one SVG point per sodium result, the correction-limit band, markers."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import replace
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.clinical.thresholds import load_thresholds
from cds_service.hooks.snapshots import snapshot_payload
from cds_service.web.chart import hidden_before, over_limit, render_trend_svg, window
from tests.web.conftest import SODIUM as SODIUM_FIXTURE
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
    # One title per chart: the page's heading names it; the SVG carries none of its own.
    assert "Serum sodium and correction limits" not in text
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
        st.integers(0, 40).map(float),  # hours after T0, up to the evaluation time (T0 + 40 h)
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
    """Law: the whole-stay chart has exactly one point per sodium result, whatever the
    series; the episode chart draws the results from the episode start and counts the rest
    as shown only in the table (so nothing is lost between the two)."""
    payload = snapshot_payload(make_context(sorted(sodium)), make_findings(), load_thresholds())
    stay = _ids(render_trend_svg(payload, view="stay"))
    assert len([i for i in stay if i.startswith("sodium-point-")]) == len(sodium)
    episode = _ids(render_trend_svg(payload))
    drawn = len([i for i in episode if i.startswith("sodium-point-")])
    assert drawn + hidden_before(payload) == len(sodium)
    has_low = any(v < load_thresholds().sodium_lower_normal for _, v, _, _ in sodium)
    assert ("limit-band" in episode) == has_low


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


def test_episode_view_starts_at_the_episode_and_stops_at_now() -> None:
    """A long stay: 20 days of normal sodium, then a fall. The default view starts at the
    episode (the band is not squeezed into a sliver) and ends at the evaluation time (no empty
    future half); the whole stay stays one click away."""
    history = [(-24.0 * d, 139.0, False, False) for d in range(20, 0, -1)]
    payload = snapshot_payload(
        make_context([*history, *SODIUM_FIXTURE]), make_findings(), load_thresholds()
    )
    start = datetime.fromisoformat(payload["limits"]["episode_start"])
    now = datetime.fromisoformat(payload["now"])
    lo, hi = window(payload)
    assert start - timedelta(hours=6) < lo <= start
    assert now <= hi <= now + timedelta(hours=3)
    assert hidden_before(payload) == len(history)
    stay_lo, stay_hi = window(payload, "stay")
    assert stay_lo < start - timedelta(days=19)
    assert now <= stay_hi <= now + (now - stay_lo) * 0.05  # only the margin, no future


def test_results_above_the_limit_are_ringed_and_named() -> None:
    """118 -> 129 mmol/L within 24 h exceeds the 24-h limit of thresholds.toml (10 mmol/L,
    Verbalis 2013): that point, and only that one, gets a ring and a legend entry."""
    payload = snapshot_payload(make_context(), make_findings(), load_thresholds())
    assert over_limit(payload) == {3}
    svg = render_trend_svg(payload)
    assert [i for i in _ids(svg) if i.startswith("sodium-over-")] == ["sodium-over-3"]
    assert "Above the correction limit" in _texts(svg)


def test_time_axis_follows_the_institution_time_zone() -> None:
    payload = snapshot_payload(make_context(), make_findings(), load_thresholds())
    text = _texts(render_trend_svg(payload, tz=ZoneInfo("America/Denver")))
    assert "Time (America/Denver)" in text and "Time (UTC)" not in text


def test_whole_blood_and_laboratory_points_differ_in_shape_and_legend() -> None:
    text = _texts(_render())
    assert "Laboratory (serum/plasma)" in text
    assert "Whole blood (blood gas / point of care)" in text
