"""Answers remembered within a call (current episode, drug classes) equal fresh answers."""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical import drugs, episode
from cds_service.clinical.context import Analyte

from .conftest import lab

_series = st.lists(
    st.tuples(st.integers(0, 72).map(float), st.integers(110, 142).map(float)), max_size=12
)


@given(first=_series, second=_series, lower=st.sampled_from([135.0, 130.0]))
def test_remembered_episode_is_the_fresh_one(first: list, second: list, lower: float) -> None:  # type: ignore[type-arg]
    # Law (common practice for a memo): asking about another series, or the same series with
    # another limit, never returns the remembered answer of the previous one.
    a = tuple(
        lab(Analyte.SODIUM, v, h, source_id=f"Observation/a{i}") for i, (h, v) in enumerate(first)
    )
    b = tuple(
        lab(Analyte.SODIUM, v, h, source_id=f"Observation/b{i}") for i, (h, v) in enumerate(second)
    )
    assert episode.current_episode(a, lower) == episode._current_episode(a, lower)
    assert episode.current_episode(a, lower) == episode._current_episode(a, lower)  # remembered
    assert episode.current_episode(b, lower) == episode._current_episode(b, lower)
    assert episode.current_episode(b, 125.0) == episode._current_episode(b, 125.0)


def test_classify_hands_out_a_fresh_list() -> None:
    # A caller that changes the list it got must not change the next caller's answer.
    first = drugs.classify(["hydrochlorothiazide"], [], "hydrochlorothiazide 25 mg tablet")
    assert first, "hydrochlorothiazide is listed as a thiazide in clinical/data/drug_classes.toml"
    first.clear()
    again = drugs.classify(["hydrochlorothiazide"], [], "hydrochlorothiazide 25 mg tablet")
    assert again and again == drugs.classify(
        ("hydrochlorothiazide",), (), "hydrochlorothiazide 25 mg tablet"
    )
