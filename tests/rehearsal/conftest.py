"""One small invented export (Larkspur Valley Hospital) and its embedded rehearsal, shared by
the rehearsal tests so that each stage runs once per session."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import orjson
import pytest

from cds_service.rehearsal import Options, rehearse
from cds_service.rehearsal.synthetic import PLANTED_FILE, generate

START = datetime(2026, 1, 1, tzinfo=UTC)
END = datetime(2026, 3, 1, tzinfo=UTC)
PATIENTS = 60


@pytest.fixture(scope="session")
def export_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("export")
    # every 20th patient carries a planted breach: patients 10, 30 and 50, one of each kind
    generate(folder, PATIENTS, days=59, seed=11, planted_every=20, malformed=3)
    return folder


@pytest.fixture(scope="session")
def truth(export_dir: Path) -> dict[str, Any]:
    return orjson.loads((export_dir / PLANTED_FILE).read_bytes())


def options(export_dir: Path, out: Path, **kw: Any) -> Options:
    fields: dict[str, Any] = {"workers": 2, "partitions": 4, **kw}
    return Options(export_dir=str(export_dir), start=START, end=END, out=str(out), **fields)


@pytest.fixture(scope="session")
def embedded(export_dir: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[dict, Path]:
    out = tmp_path_factory.mktemp("embedded")
    cases = out / "cases.csv"
    report = rehearse(options(export_dir, out, cases=str(cases)))
    return report, out
