"""Series, the current result per analyte, and pairing of glucose/urea with the sodium draw."""

from __future__ import annotations

import random

from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte
from cds_service.config import IngestSettings
from tests.fhir.factory import ingest, observation


def test_series_oldest_first_and_current_is_latest() -> None:
    res = ingest(
        observation("n2", "2951-2", 124, when="2026-11-30T06:00:00Z"),
        observation("n1", "2951-2", 119, when="2026-11-29T06:00:00Z"),
        observation("n3", "2947-0", 126, when="2026-11-30T10:00:00Z"),
    )
    values = [r.value for r in res.context.series[Analyte.SODIUM]]
    assert values == [119, 124, 126]
    assert res.context.current[Analyte.SODIUM].source_id == "Observation/n3"


def test_current_respects_lookback_and_settings_override() -> None:
    old = observation("n", "2951-2", 124, when="2026-11-27T12:00:00Z")  # 72 h before NOW
    assert Analyte.SODIUM not in ingest(old).context.current  # default sodium lookback 48 h
    assert Analyte.SODIUM in ingest(old).context.series
    wide = IngestSettings(lookback_hours={"sodium": 96})
    assert Analyte.SODIUM in ingest(old, settings=wide).context.current


def test_glucose_paired_with_sodium_draw_not_another_day() -> None:
    res = ingest(
        observation("na", "2951-2", 124, when="2026-11-30T08:00:00Z"),
        observation("glu-yday", "2345-7", 600, unit="mg/dL", when="2026-11-29T08:00:00Z"),
        observation("glu-near", "2345-7", 110, unit="mg/dL", when="2026-11-30T08:30:00Z"),
        observation("glu-far", "2345-7", 300, unit="mg/dL", when="2026-11-30T11:00:00Z"),
        observation("bun", "3094-0", 20, unit="mg/dL", when="2026-11-29T08:00:00Z"),
    )
    cur = res.context.current
    assert cur[Analyte.GLUCOSE].source_id == "Observation/glu-near"
    assert Analyte.UREA_NITROGEN not in cur  # yesterday's draw is not paired
    assert len(res.context.series[Analyte.UREA_NITROGEN]) == 1


def test_pairing_window_is_configurable() -> None:
    resources = (
        observation("na", "2951-2", 124, when="2026-11-30T08:00:00Z"),
        observation("glu", "2345-7", 110, unit="mg/dL", when="2026-11-30T11:00:00Z"),
    )
    assert Analyte.GLUCOSE not in ingest(*resources).context.current
    wide = IngestSettings(pairing_hours=4)
    assert Analyte.GLUCOSE in ingest(*resources, settings=wide).context.current


def test_without_sodium_glucose_is_its_own_latest() -> None:
    res = ingest(observation("glu", "2345-7", 110, unit="mg/dL", when="2026-11-30T11:00:00Z"))
    assert res.context.current[Analyte.GLUCOSE].value == 110


def test_long_lookbacks_for_slow_analytes() -> None:
    res = ingest(
        observation("tsh", "3016-3", 2.1, unit="mIU/L", when="2026-11-10T08:00:00Z"),
        observation("wt", "29463-7", 154, unit="[lb_av]", when="2026-11-20T08:00:00Z"),
    )
    assert Analyte.TSH in res.context.current
    assert abs(res.context.current[Analyte.BODY_WEIGHT].value - 69.853) < 0.01


_HOURS = st.lists(st.integers(min_value=1, max_value=200), min_size=1, max_size=12, unique=True)


@settings(max_examples=40, deadline=None)
@given(hours=_HOURS, seed=st.integers(min_value=0, max_value=10_000))
def test_order_of_resources_does_not_matter(hours: list[int], seed: int) -> None:
    resources = [
        observation(
            f"n{h}",
            "2951-2",
            110 + h % 30,
            when=f"2026-11-{30 - h // 24:02d}T{23 - h % 24:02d}:00:00Z",
        )
        for h in hours
    ]
    shuffled = resources[:]
    random.Random(seed).shuffle(shuffled)
    a, b = ingest(*resources).context, ingest(*shuffled).context
    assert a.series == b.series and a.current == b.current
    times = [r.time for r in a.series.get(Analyte.SODIUM, ())]
    assert times == sorted(times)
