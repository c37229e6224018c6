"""Authentication fuzz: with ``auth.required`` and no token a client could hold, every call to
discovery, hook and feedback is refused with 401, ``WWW-Authenticate: Bearer`` and an
OperationOutcome (CDS Hooks 2.0, Security; issue 5), whatever the Authorization header says.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.evidence._support import assert_clean, open_client, trial_settings

header_text = st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126), max_size=200)
authorization = (
    header_text
    | header_text.map(lambda t: "Bearer " + t)
    | st.lists(header_text.filter(lambda t: "." not in t), min_size=3, max_size=3).map(
        lambda parts: "Bearer " + ".".join(parts)
    )
    | st.sampled_from(
        [
            "Bearer eyJhbGciOiJub25lIiwidHlwIjoiSldUIn0.eyJpc3MiOiJ4In0.",
            "Bearer " + "A" * 8000,
            "Basic dG9uaWNpdHk6dG9uaWNpdHk=",
            "bearer",
        ]
    )
)


@pytest.fixture(scope="module")
def locked_client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[TestClient]:
    settings_ = trial_settings(
        tmp_path_factory.mktemp("auth"), auth={"required": True}, local_trial=False
    )
    with open_client(settings_) as c:
        yield c


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    header=authorization,
    target=st.sampled_from(
        [
            ("GET", "/cds-services"),
            ("POST", "/cds-services/sodium-workup"),
            ("POST", "/cds-services/sodium-order-sign/feedback"),
        ]
    ),
)
def test_every_call_without_a_valid_token_is_401(
    locked_client: TestClient, header: str, target: tuple[str, str]
) -> None:
    method, path = target
    response: Any = locked_client.request(
        method, path, headers={"Authorization": header}, content=b"{}"
    )
    assert_clean(response, "auth")
    assert response.status_code == 401
    assert response.headers.get("www-authenticate", "").lower().startswith("bearer")
