"""Shared fixtures: store URLs for SQLite (always) and PostgreSQL (when CI provides one).

PostgreSQL tests read ``TONICITY_TEST_POSTGRES_URL`` and skip, saying why, when it is unset.
Each PostgreSQL test gets its own schema (dropped afterwards), so tests never see each
other's rows even though they share one database.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings
from sqlalchemy import create_engine, make_url, text

from cds_service.store import Store

# Property tests measure correctness, never speed: no per-example deadline (a loaded CI
# machine would turn slowness into false failures). Under CI the examples are derandomised,
# so a run is repeatable; locally they vary, to keep finding new cases.
settings.register_profile(
    "tonicity",
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
    derandomize=bool(os.environ.get("CI")),
    print_blob=True,
)
settings.load_profile("tonicity")

POSTGRES_ENV = "TONICITY_TEST_POSTGRES_URL"
FIXTURES = Path(__file__).parent / "fixtures"


@pytest.fixture
def fixtures_dir() -> Path:
    return FIXTURES


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'store.db'}"


@pytest.fixture
def postgres_url() -> Iterator[str]:
    url = os.environ.get(POSTGRES_ENV)
    if not url:
        pytest.skip(f"{POSTGRES_ENV} is unset: no PostgreSQL server to test against")
    schema = f"t_{uuid.uuid4().hex[:16]}"
    admin = create_engine(url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        yield (
            make_url(url)
            .update_query_dict({"options": f"-csearch_path={schema}"})
            .render_as_string(hide_password=False)
        )
    finally:
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def store_url(request: pytest.FixtureRequest) -> str:
    """The same test once on a SQLite file and once on PostgreSQL."""
    return str(request.getfixturevalue(f"{request.param}_url"))


@pytest.fixture
def store(store_url: str) -> Iterator[Store]:
    s = Store(store_url)
    try:
        yield s
    finally:
        s.close()
