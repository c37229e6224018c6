"""Defensive reading of raw FHIR JSON: any shape in, typed values or None out."""

from __future__ import annotations

import math
from collections.abc import Iterator
from functools import cache, lru_cache
from typing import Any

from cds_service.fhir._data import load


def obj(value: Any) -> dict[str, Any]:
    return value if isinstance(value, dict) else {}


def items(value: Any) -> list[Any]:
    return value if isinstance(value, list) else []


def text(value: Any) -> str | None:
    return value if isinstance(value, str) and value.strip() else None


def number(value: Any) -> float | None:
    if isinstance(value, bool):
        return None
    if isinstance(value, int | float):
        out = float(value)
    elif isinstance(value, str):
        try:
            out = float(value.strip())
        except ValueError:
            return None
    else:
        return None
    return out if math.isfinite(out) else None


@cache
def _system_aliases() -> dict[str, str]:
    return dict(load("systems")["aliases"])


@lru_cache(maxsize=256)
def system_uri(system: str) -> str:
    """The canonical URI for a code system identifier (OID or URI variant, see systems.toml)."""
    s = system.strip()
    s = s[:-1] if s.endswith("/") else s
    return _system_aliases().get(s, s)


def codings(concept: Any) -> Iterator[tuple[str, str, str]]:
    """(system, code, display) of every coding in a CodeableConcept (missing parts as "").

    Systems come back canonical: "urn:oid:2.16.840.1.113883.6.1" reads as http://loinc.org.
    """
    for coding in items(obj(concept).get("coding")):
        c = obj(coding)
        code = text(c.get("code"))
        system = text(c.get("system"))
        yield (
            system_uri(system) if system else "",
            code.strip() if code else "",
            text(c.get("display")) or "",
        )


def concept_text(concept: Any) -> str:
    """Best human text of a CodeableConcept: its text, else the first coding display."""
    c = obj(concept)
    found = text(c.get("text"))
    if found:
        return found
    for _system, code, display in codings(c):
        if display:
            return display
        if code:
            return code
    return ""


def reference(value: Any) -> str | None:
    return text(obj(value).get("reference"))
