"""Read the FHIR layer's TOML data files once (they ship inside the package)."""

from __future__ import annotations

import tomllib
from functools import cache
from importlib import resources
from typing import Any


@cache
def load(name: str) -> dict[str, Any]:
    """The parsed ``cds_service/fhir/data/<name>.toml``."""
    text = resources.files("cds_service.fhir").joinpath("data", f"{name}.toml").read_text("utf-8")
    return tomllib.loads(text)
