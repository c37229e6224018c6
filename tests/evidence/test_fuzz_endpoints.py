"""Property-based fuzzing of the hook, feedback and discovery endpoints through the ASGI app.

Law (CDS Hooks 2.0 and this project's error rule): whatever a caller sends, the service never
answers 5xx, and every error answer is a FHIR OperationOutcome. Inputs: random JSON of any
shape, valid requests with random parts replaced or removed, raw bytes (invalid UTF-8), and
the classic parser traps (NaN and Infinity literals, integers beyond Python's digit limit,
deep nesting, very long strings, lone surrogates). Fast variants run by default; the ``_long``
variants (``-m slow``) run the same properties with many more examples.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Callable, Iterator
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks import requests as rq
from tests.evidence._support import assert_clean

FAST = settings(
    max_examples=40,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
LONG = settings(FAST, max_examples=1500)

SERVICE_IDS = tuple(rq.SERVICE_IDS.values())
HOOK_OF = {sid: hook for hook, sid in rq.SERVICE_IDS.items()}
BASE = {hook: rq.hook_request(hook, 30) for hook in rq.SERVICE_IDS}
FEEDBACK_BASE = {
    "feedback": [
        {
            "card": "0b7c3f4e-9a55-4d1e-8a51-5e3a6f0c2d11",
            "outcome": "overridden",
            "overrideReason": {
                "reason": {"code": "lvh-reviewed", "display": "Reviewed"},
                "userComment": "Seen on the ward round.",
            },
            "outcomeTimestamp": "2026-03-14T09:35:00Z",
        },
        {
            "card": "3f0a1b2c-4d5e-4f60-8a7b-9c0d1e2f3a4b",
            "outcome": "accepted",
            "acceptedSuggestions": [{"id": "a1b2c3d4-0000-4000-8000-000000000001"}],
            "outcomeTimestamp": "2026-03-14T09:36:00Z",
        },
    ]
}

odd_text = st.text(
    alphabet=st.characters(codec=None, exclude_categories=()), max_size=40
) | st.sampled_from(["", "\u0000", "\u202e\u2066", "🧂" * 20, "Ω≈ç√", "\ufeff", "a" * 300])
json_scalars = (
    st.none()
    | st.booleans()
    | st.integers(min_value=-(10**40), max_value=10**40)
    | st.floats(allow_nan=True, allow_infinity=True)
    | odd_text
)
json_values = st.recursive(
    json_scalars,
    lambda children: (
        st.lists(children, max_size=4)
        | st.dictionaries(
            odd_text | st.sampled_from(["resourceType", "value", "entry"]), children, max_size=4
        )
    ),
    max_leaves=25,
)


def _paths(node: Any, prefix: tuple[Any, ...] = ()) -> Iterator[tuple[Any, ...]]:
    yield prefix
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _paths(value, (*prefix, key))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            yield from _paths(value, (*prefix, i))


def _mutate(body: Any, path: tuple[Any, ...], op: str, value: Any) -> Any:
    """Replace, delete or wrap the node at ``path`` (skipped if an earlier edit removed it)."""
    if not path:
        return value if op == "replace" else [body]
    parent = body
    for step in path[:-1]:
        try:
            parent = parent[step]
        except (KeyError, IndexError, TypeError):
            return body
    last = path[-1]
    if not isinstance(parent, dict | list):  # an earlier edit replaced a container by a scalar
        return body
    try:
        current = parent[last]
    except (KeyError, IndexError, TypeError):
        return body
    if op == "delete":
        del parent[last]
    elif op == "wrap":
        parent[last] = [current]
    else:
        parent[last] = value
    return body


PATHS = {hook: list(_paths(body)) for hook, body in BASE.items()}
FEEDBACK_PATHS = list(_paths(FEEDBACK_BASE))
mutation = st.tuples(st.sampled_from(["replace", "delete", "wrap"]), json_values)


def _dumps(body: Any) -> bytes:
    """JSON text as a careless client might send it: NaN and Infinity literals allowed."""
    return json.dumps(body, allow_nan=True).encode("utf-8", "surrogatepass")


def _post(client: Any, path: str, content: bytes) -> Any:
    return client.post(path, content=content, headers={"Content-Type": "application/json"})


def _pair(check: Callable[..., None], **strategies: Any) -> tuple[Any, Any]:
    """A fast test and a long (slow-marked) test of the same property."""
    fast = FAST(given(**strategies)(check))
    long = pytest.mark.slow(LONG(given(**strategies)(check)))
    return fast, long


# --- hook endpoints ------------------------------------------------------------------------


def _hook_random(client: Any, service_id: str, body: Any) -> None:
    assert_clean(_post(client, f"/cds-services/{service_id}", _dumps(body)), "hook")


test_hook_random_json, test_hook_random_json_long = _pair(
    _hook_random,
    service_id=st.sampled_from([*SERVICE_IDS, "no-such-service", "sodium-workup%00"]),
    body=json_values,
)


def _hook_mutated(client: Any, service_id: str, data: st.DataObject) -> None:
    hook = HOOK_OF[service_id]
    body = copy.deepcopy(BASE[hook])
    for _ in range(data.draw(st.integers(1, 4), label="edits")):
        path = data.draw(st.sampled_from(PATHS[hook]), label="path")
        op, value = data.draw(mutation, label="edit")
        body = _mutate(body, path, op, value)
    assert_clean(_post(client, f"/cds-services/{service_id}", _dumps(body)), "hook")


test_hook_mutated, test_hook_mutated_long = _pair(
    _hook_mutated, service_id=st.sampled_from(SERVICE_IDS), data=st.data()
)


def _hook_bytes(client: Any, service_id: str, raw: bytes) -> None:
    assert_clean(_post(client, f"/cds-services/{service_id}", raw), "hook")


test_hook_raw_bytes, test_hook_raw_bytes_long = _pair(
    _hook_bytes,
    service_id=st.sampled_from(SERVICE_IDS),
    raw=st.binary(max_size=300) | st.sampled_from([b"\xff\xfe{}", b'{"hook": "\xc3\x28"}']),
)


def _first_sodium(body: dict[str, Any]) -> dict[str, Any]:
    return body["prefetch"]["sodium"]["entry"][0]["resource"]["valueQuantity"]


@pytest.mark.parametrize(
    "literal", ["NaN", "Infinity", "-Infinity", "1e308", "1e999", "-0.0", "4.9e-324", "9" * 5000]
)
@pytest.mark.parametrize("service_id", SERVICE_IDS)
def test_non_finite_and_huge_numbers_in_results(client: Any, service_id: str, literal: str) -> None:
    """A sodium value that is NaN, infinite, huge, tiny or over the int digit limit."""
    body = copy.deepcopy(BASE[HOOK_OF[service_id]])
    _first_sodium(body)["value"] = "@@NUMBER@@"
    raw = json.dumps(body).replace('"@@NUMBER@@"', literal).encode()
    assert_clean(_post(client, f"/cds-services/{service_id}", raw), "hook")


@pytest.mark.parametrize("depth", [50, 1_000, 100_000])
@pytest.mark.parametrize("where", ["body", "prefetch"])
def test_deep_nesting(client: Any, depth: int, where: str) -> None:
    nested = "[" * depth + "]" * depth
    if where == "body":
        raw = nested.encode()
    else:
        raw = json.dumps(BASE["patient-view"])[:-1].encode() + b', "extra": ' + nested.encode()
        raw += b"}"
    assert_clean(_post(client, "/cds-services/sodium-workup", raw), "hook")


@pytest.mark.parametrize("field", ["patientId", "userId", "hookInstance", "display"])
def test_long_strings(client: Any, field: str) -> None:
    body = copy.deepcopy(BASE["patient-view"])
    long_text = "Ł" * 1_000_000
    if field == "display":
        body["prefetch"]["sodium"]["entry"][0]["resource"]["code"]["text"] = long_text
    elif field == "hookInstance":
        body["hookInstance"] = long_text
    else:
        body["context"][field] = long_text
    assert_clean(_post(client, "/cds-services/sodium-workup", _dumps(body)), "hook")


def test_body_over_the_limit_is_413(client: Any) -> None:
    raw = b'{"pad": "' + b"x" * 6_000_000 + b'"}'
    response = _post(client, "/cds-services/sodium-workup", raw)
    assert_clean(response, "hook")
    assert response.status_code == 413


@pytest.mark.parametrize("where", ["patientId", "display", "unit", "key"])
def test_lone_surrogates(client: Any, where: str) -> None:
    """``"\\ud800"`` is valid JSON text but not encodable as UTF-8 once decoded."""
    body = copy.deepcopy(BASE["patient-view"])
    marker = "@@S@@"
    if where == "patientId":
        body["context"]["patientId"] = marker
    elif where == "display":
        body["prefetch"]["sodium"]["entry"][0]["resource"]["code"]["text"] = marker
    elif where == "unit":
        _first_sodium(body)["unit"] = marker
        _first_sodium(body)["code"] = marker
    else:
        body["prefetch"][marker] = None
    raw = json.dumps(body).replace(marker, "\\ud800x\\udfff").encode()
    assert_clean(_post(client, "/cds-services/sodium-workup", raw), "hook")


# --- feedback endpoint ---------------------------------------------------------------------


def _feedback_random(client: Any, service_id: str, body: Any) -> None:
    assert_clean(_post(client, f"/cds-services/{service_id}/feedback", _dumps(body)), "feedback")


test_feedback_random_json, test_feedback_random_json_long = _pair(
    _feedback_random, service_id=st.sampled_from([*SERVICE_IDS, "nope"]), body=json_values
)


def _feedback_mutated(client: Any, data: st.DataObject) -> None:
    body = copy.deepcopy(FEEDBACK_BASE)
    for _ in range(data.draw(st.integers(1, 3), label="edits")):
        path = data.draw(st.sampled_from(FEEDBACK_PATHS), label="path")
        op, value = data.draw(mutation, label="edit")
        body = _mutate(body, path, op, value)
    raw = _dumps(body)
    assert_clean(_post(client, "/cds-services/sodium-workup/feedback", raw), "feedback")


test_feedback_mutated, test_feedback_mutated_long = _pair(_feedback_mutated, data=st.data())


def _feedback_bytes(client: Any, raw: bytes) -> None:
    assert_clean(_post(client, "/cds-services/sodium-workup/feedback", raw), "feedback")


test_feedback_raw_bytes, test_feedback_raw_bytes_long = _pair(
    _feedback_bytes, raw=st.binary(max_size=300)
)


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "9" * 5000, '"\\ud800"'])
def test_feedback_parser_traps(client: Any, literal: str) -> None:
    body = copy.deepcopy(FEEDBACK_BASE)
    body["feedback"][0]["overrideReason"]["userComment"] = "@@X@@"
    raw = json.dumps(body).replace('"@@X@@"', literal).encode()
    assert_clean(_post(client, "/cds-services/sodium-workup/feedback", raw), "feedback")


# --- discovery and everything else ---------------------------------------------------------

query_text = st.text(alphabet=st.characters(min_codepoint=33, max_codepoint=126), max_size=40)


def _discovery(client: Any, query: str, method: str) -> None:
    response = client.request(method, "/cds-services", params={"q": query})
    assert_clean(response, "discovery")
    if method == "GET":
        assert response.status_code == 200
        assert len(response.json()["services"]) >= 3


test_discovery, test_discovery_long = _pair(
    _discovery, query=query_text, method=st.sampled_from(["GET", "PUT", "DELETE", "PATCH"])
)


def _paths_fuzz(client: Any, path: str, method: str) -> None:
    assert_clean(client.request(method, "/cds-services/" + path, content=b"{}"), "paths")


test_service_paths, test_service_paths_long = _pair(
    _paths_fuzz, path=query_text, method=st.sampled_from(["GET", "POST", "PUT", "DELETE"])
)
