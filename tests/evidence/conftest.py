"""Fixtures for the evidence tests: the whole app over ASGI (lifespan run), and the case count
printed at the end of the session (``evidence cases: ...``) so EVIDENCE.md can quote it.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient

from tests.evidence._support import CASES, open_client, trial_settings


@pytest.fixture(scope="module")
def client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[TestClient]:
    """One app per test module (hypothesis reuses it across examples)."""
    with open_client(trial_settings(tmp_path_factory.mktemp("evidence"))) as c:
        yield c


def pytest_terminal_summary(terminalreporter: Any) -> None:
    if CASES:
        parts = ", ".join(f"{k}={v}" for k, v in sorted(CASES.items()))
        terminalreporter.write_line(f"evidence cases: {parts} (total {sum(CASES.values())})")
