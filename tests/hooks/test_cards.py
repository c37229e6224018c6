"""Finding -> Card rendering and the response JSON rules, as laws over generated findings.

Card shape: HL7 CDS Hooks 2.0, "CDS Service Response" (open standard): summary under 140
characters, indicator info|warning|critical, source.label, source.topic Coding, suggestions
with create/delete actions, selectionBehavior, overrideReasons; no null or empty values.
Resource validity: fhir.resources R4B models (reference library for FHIR R4).
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime, timedelta
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte
from cds_service.clinical.findings import (
    Finding,
    FindingCode,
    InputUsed,
    Urgency,
    Value,
    ValueName,
)
from cds_service.hooks.cards import (
    CAUTION,
    OVERRIDE_REASONS,
    one_per_code,
    render_card,
    suggested_tests,
)
from cds_service.hooks.models import HookResponse, encode, prune, strict_dumps, to_json
from tests.hooks.conformance import check_response, empties

NOW = datetime(2026, 3, 14, 9, 0, tzinfo=UTC)
ORDERABLE = [
    Analyte.OSMOLALITY,
    Analyte.URINE_OSMOLALITY,
    Analyte.URINE_SODIUM,
    Analyte.TSH,
    Analyte.CORTISOL,
]
RANK = {Urgency.INFO: 0, Urgency.WARNING: 1, Urgency.CRITICAL: 2}

text = st.text(st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")), max_size=40)
summaries = text.filter(lambda s: s.strip()).map(lambda s: s[:139])
values = st.builds(
    Value,
    name=st.sampled_from(
        [v for v in ValueName if v not in (ValueName.SEVERITY, ValueName.CORRECTED_SEVERITY)]
    ),
    value=st.floats(min_value=-1000, max_value=1000, allow_nan=False),
)
inputs = st.builds(
    InputUsed,
    label=summaries,
    value=st.floats(min_value=0, max_value=500, allow_nan=False),
    unit=st.sampled_from(["mmol/L", "mosm/kg", "mg/dL"]),
    time=st.none() | st.integers(0, 24 * 30).map(lambda h: NOW - timedelta(hours=h)),
    source_id=st.none() | st.just("Observation/lvh-obs-1"),
)
findings = st.builds(
    Finding,
    code=st.sampled_from(list(FindingCode)),
    urgency=st.sampled_from(list(Urgency)),
    summary=summaries,
    details=st.lists(text, max_size=3).map(tuple),
    values=st.lists(values, max_size=4).map(tuple),
    inputs=st.lists(inputs, max_size=3).map(tuple),
    formulas=st.lists(text, max_size=2).map(tuple),
    sources=st.lists(text, max_size=2).map(tuple),
    missing=st.lists(st.sampled_from(ORDERABLE), unique=True, max_size=3).map(
        lambda xs: tuple(str(x) for x in xs)
    ),
    cautions=st.lists(text, max_size=2).map(tuple),
    remove_draft=st.none() | st.just("MedicationRequest/lvh-draft-7"),
)


@settings(max_examples=60, deadline=None)
@given(findings)
def test_any_finding_renders_a_conformant_card(finding: Finding) -> None:
    card = render_card(finding, now=NOW, patient_id="lvh-pt-1042")
    body = to_json(HookResponse(cards=[card]))
    check_response(body)  # no empties, summary < 140, R4B-valid resources, caution present
    out = body["cards"][0]
    assert out["summary"] == finding.summary
    assert out["indicator"] == finding.urgency.value
    assert out["detail"].rstrip().endswith(CAUTION)
    creates = [a for s in out.get("suggestions", []) for a in s["actions"] if a["type"] == "create"]
    deletes = [a for s in out.get("suggestions", []) for a in s["actions"] if a["type"] == "delete"]
    assert len(creates) == len(finding.missing)
    assert [d["resourceId"] for d in deletes] == (
        [finding.remove_draft] if finding.remove_draft else []
    )
    for create in creates:
        assert create["resource"]["subject"]["reference"] == "Patient/lvh-pt-1042"
    reasons = [r["code"] for r in out.get("overrideReasons", [])]
    weighty = finding.urgency in (Urgency.WARNING, Urgency.CRITICAL)
    assert reasons == ([c for c, _ in OVERRIDE_REASONS] if weighty else [])
    named = [(v["name"], v["unit"]) for v in out.get("extension", {}).get("tonicity.values", [])]
    assert named == [(str(v.name), v.unit) for v in finding.values]


@settings(max_examples=60, deadline=None)
@given(st.lists(findings, max_size=8), st.randoms(use_true_random=False))
def test_one_per_code_keeps_the_weightiest_whatever_the_order(fs, rnd) -> None:  # type: ignore[no-untyped-def]
    kept = one_per_code(fs)
    codes = [f.code for f in kept]
    assert len(codes) == len(set(codes)) and set(codes) == {f.code for f in fs}
    for f in kept:
        assert RANK[f.urgency] == max(RANK[g.urgency] for g in fs if g.code == f.code)
    assert one_per_code(kept) == kept  # idempotent
    shuffled = fs[:]
    rnd.shuffle(shuffled)
    assert {(f.code, f.urgency) for f in one_per_code(shuffled)} == {
        (f.code, f.urgency) for f in kept
    }
    assert [RANK[f.urgency] for f in kept] == sorted((RANK[f.urgency] for f in kept), reverse=True)


json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers()
    | st.text(max_size=3)
    | st.floats(allow_nan=False, allow_infinity=False),
    lambda children: (
        st.lists(children, max_size=3) | st.dictionaries(st.text(max_size=3), children, max_size=3)
    ),
    max_leaves=20,
)


@given(json_values)
def test_prune_leaves_no_empties_keeps_data_and_is_idempotent(value) -> None:  # type: ignore[no-untyped-def]
    pruned = prune(value)
    assert prune(pruned) == pruned
    if isinstance(pruned, (dict, list)):
        inner = pruned.values() if isinstance(pruned, dict) else pruned
        assert not [p for item in inner for p in empties(item)]
    if value is False or value == 0:
        assert pruned == value  # false and zero are data, not absence


def _reference_prune(value: Any) -> Any:
    """The rule as written before the faster walk (common practice: an optimisation keeps the
    answer): drop None and empty strings, arrays and objects, recursively."""

    def empty(v: Any) -> bool:
        return v is None or (isinstance(v, (str, list, dict)) and len(v) == 0)

    if isinstance(value, dict):
        out = {k: _reference_prune(v) for k, v in value.items()}
        return {k: v for k, v in out.items() if not empty(v)}
    if isinstance(value, (list, tuple)):
        return [p for p in (_reference_prune(v) for v in value) if not empty(p)]
    return value


@given(json_values)
def test_prune_gives_the_reference_answer_and_encodes_to_the_same_data(value) -> None:  # type: ignore[no-untyped-def]
    pruned = prune(value)
    assert pruned == _reference_prune(value)
    # the bytes read back as the same data (by the standard library, which keeps integers
    # beyond 64 bits exact; strict_json, like orjson, reads them as doubles)
    assert json.loads(encode(pruned)) == pruned


_NOT_FINITE = st.sampled_from([math.nan, math.inf, -math.inf])


@given(json_values, _NOT_FINITE, st.integers(0, 3))
def test_a_non_finite_number_anywhere_fails_loudly(value, bad, depth) -> None:  # type: ignore[no-untyped-def]
    """RFC 8259 section 6 has no NaN or Infinity; orjson would write them as null, so the
    walk before it refuses them, however deep, instead of sending a silent null."""
    nested: Any = bad
    for i in range(depth):
        nested = {"k": nested} if i % 2 else [nested, value]
    with pytest.raises(ValueError, match="not JSON"):
        prune({"a": value, "b": nested})
    with pytest.raises(ValueError, match="not JSON"):
        strict_dumps({"a": value, "b": nested})


@given(json_values)
def test_strict_dumps_keeps_the_data_as_it_is(value) -> None:  # type: ignore[no-untyped-def]
    """The trend snapshot's writer: nothing pruned (an empty series is data there), and the
    bytes read back as the same data (standard library reader, exact integers)."""
    assert json.loads(strict_dumps(value)) == value


def test_a_nan_in_a_card_extension_is_refused_not_sent_as_null() -> None:
    """pydantic's JSON mode writes a non-finite number inside a free-form object as null;
    to_json dumps Python data and lets prune refuse it."""
    finding = Finding(FindingCode.HYPOTONIC, Urgency.INFO, "Hypotonic hyponatremia")
    card = render_card(finding, now=NOW, patient_id="p")
    card.extension = {"example.org/value": math.nan}
    with pytest.raises(ValueError, match="not JSON"):
        to_json(HookResponse(cards=[card]))
    card.extension = {"example.org/when": NOW}  # not JSON data: refused, never guessed
    with pytest.raises(ValueError, match="not JSON"):
        to_json(HookResponse(cards=[card]))


def test_input_age_is_relative_to_now() -> None:
    finding = Finding(
        FindingCode.HYPOTONIC,
        Urgency.INFO,
        "Hypotonic hyponatremia",
        inputs=(InputUsed("Serum sodium", 128, "mmol/L", NOW - timedelta(hours=5)),),
    )
    detail = render_card(finding, now=NOW, patient_id="p").detail or ""
    assert "Serum sodium: 128 mmol/L, taken 2026-03-14 04:00 UTC (5 h ago)" in detail


_ORDERABLE = [
    "osmolality",
    "urine_osmolality",
    "urine_sodium",
    "urine_potassium",
    "tsh",
    "cortisol",
]


@given(
    missing=st.lists(
        st.lists(st.sampled_from(_ORDERABLE), unique=True, max_size=4), min_size=1, max_size=5
    )
)
def test_each_missing_test_is_offered_once_per_response(missing: list[list[str]]) -> None:
    """Laws of suggested_tests: a test is offered on at most one card of a response, every
    test some finding misses is offered somewhere, and only where that finding misses it
    (common practice: one order button per test, so no order is drafted twice)."""
    findings = [
        Finding(FindingCode.HYPOTONIC, Urgency.INFO, f"finding {i}", missing=tuple(m))
        for i, m in enumerate(missing)
    ]
    offered = suggested_tests(findings)
    flat = [a for tests in offered for a in tests]
    assert len(flat) == len(set(flat))
    assert set(flat) == {a for m in missing for a in m}
    assert all(set(t) <= set(f.missing) for t, f in zip(offered, findings, strict=True))


def test_the_most_specific_card_offers_a_shared_test() -> None:
    # The endocrine screen (TSH, cortisol) is more specific to TSH than the SIADH card that
    # also misses urine potassium: the buttons go to the endocrine card.
    siadh = Finding(
        FindingCode.SIADH_PATTERN,
        Urgency.INFO,
        "siadh",
        missing=("tsh", "cortisol", "urine_potassium"),
    )
    endo = Finding(FindingCode.ENDOCRINE_SCREEN, Urgency.INFO, "endo", missing=("tsh", "cortisol"))
    assert suggested_tests([siadh, endo]) == [("urine_potassium",), ("tsh", "cortisol")]
