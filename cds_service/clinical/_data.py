"""Reading the clinical data files (``clinical/data/*.toml``) once, with their citations.

Each data file is parsed on first use and cached for the life of the process. Loaders in the
modules that own a file validate its entries; this module only reads TOML and resolves the
citation keys that every entry's ``source`` names.
"""

from __future__ import annotations

import tomllib
from functools import cache
from importlib import resources
from typing import Any

COMMON_PRACTICE = "common practice"


class DataFileError(ValueError):
    """A clinical data file is malformed: the package is broken, not the caller's input."""


@cache
def read_data_file(name: str) -> dict[str, Any]:
    """The parsed TOML of ``clinical/data/<name>`` (cached)."""
    text = resources.files("cds_service.clinical").joinpath("data", name).read_text("utf-8")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DataFileError(f"{name}: {exc}") from None


@cache
def citations() -> dict[str, str]:
    """Citation key -> printed reference, from ``citations.toml`` (``(from memory)`` appended
    when the entry was not checked against the text)."""
    out: dict[str, str] = {}
    for key, entry in read_data_file("citations.toml").items():
        text = entry.get("text") if isinstance(entry, dict) else None
        checked = entry.get("checked") if isinstance(entry, dict) else None
        if not isinstance(text, str) or not text or not isinstance(checked, bool):
            raise DataFileError(f"citations.toml: [{key}] needs text and checked")
        out[key] = text if checked else f"{text} (from memory)"
    return out


def check_source(file: str, where: str, source: object) -> str:
    """Validate a ``source`` field: a citation key or ``common practice``."""
    if source == COMMON_PRACTICE or (isinstance(source, str) and source in citations()):
        return source
    raise DataFileError(f"{file}: {where} has unknown source {source!r}")


def cite(source: str, from_memory: bool = False) -> str:
    """The printed reference of a ``source`` field, marked when the entry was written from
    memory."""
    if source == COMMON_PRACTICE:
        # No text to check against: "from memory" can only mean the figure was recalled.
        detail = "; the figure is from memory" if from_memory else ""
        return f"Common practice (no single published source{detail})"
    text = citations()[source]
    if from_memory and not text.endswith("(from memory)"):
        text += " (from memory)"
    return text


def require(file: str, where: str, entry: dict[str, Any], key: str, kind: type | tuple) -> Any:
    """``entry[key]`` checked against ``kind`` (bool is never accepted as a number)."""
    value = entry.get(key)
    if isinstance(value, bool) and kind is not bool:
        value = None
    if not isinstance(value, kind):
        raise DataFileError(f"{file}: {where} needs {key} of type {kind}")
    return value
