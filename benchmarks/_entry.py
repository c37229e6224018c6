"""uvicorn factory for the benchmarks: the service built from the config file named by the
``TONICITY_BENCH_CONFIG`` environment variable (so that ``--workers 2`` can import it).

    TONICITY_BENCH_CONFIG=bench.toml uvicorn benchmarks._entry:make_app --factory
"""

from __future__ import annotations

import os

from fastapi import FastAPI


def make_app() -> FastAPI:
    from cds_service.app import create_app
    from cds_service.config import load_settings

    return create_app(load_settings(os.environ["TONICITY_BENCH_CONFIG"]))
