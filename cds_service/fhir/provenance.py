"""Where the FHIR layer's data files come from: the `source`, `checked` and `locator` fields.

The mapping code reads only what it maps (codes, units, hours); this module reads and
validates the provenance fields beside them, for ``tonicity knowledge`` and the tests. A
missing ``checked`` reads as ``False`` (unchecked): an entry is never presented as verified
unless its file says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from typing import Any

from cds_service.fhir._data import load

COMMON_PRACTICE = "common practice"


class ProvenanceError(ValueError):
    """A provenance field of a FHIR data file is malformed (the package is broken)."""


@dataclass(frozen=True, slots=True)
class Provenance:
    source: str
    checked: bool
    locator: str = ""

    @property
    def common_practice(self) -> bool:
        return self.source.strip().lower().startswith(COMMON_PRACTICE)


def read(where: str, table: dict[str, Any]) -> Provenance:
    """The provenance fields of one table, validated."""
    source = table.get("source", "")
    checked = table.get("checked", False)
    locator = table.get("locator", "")
    if not isinstance(source, str) or not isinstance(locator, str):
        raise ProvenanceError(f"{where}: source and locator must be strings")
    if not isinstance(checked, bool):
        raise ProvenanceError(f"{where}: checked must be true or false")
    if checked and not (source.strip() or locator.strip()):
        raise ProvenanceError(f"{where}: checked needs a source or locator saying where")
    return Provenance(source=source.strip(), checked=checked, locator=locator.strip())


@cache
def conditions() -> dict[str, Provenance]:
    """Condition category -> provenance of its code set (conditions.toml)."""
    return {
        key: read(f"conditions.toml [{key}]", entry) for key, entry in load("conditions").items()
    }


@cache
def units() -> dict[str, Provenance]:
    """Analyte -> provenance of its plausible range and conversion figures (units.toml)."""
    return {
        key: read(f"units.toml [analyte.{key}]", entry)
        for key, entry in load("units")["analyte"].items()
    }


@cache
def file_level(name: str) -> Provenance:
    """The ``[provenance]`` table of a file whose entries share one source
    (medications, systems, lookback)."""
    table = load(name).get("provenance")
    if not isinstance(table, dict):
        raise ProvenanceError(f"{name}.toml needs a [provenance] table")
    return read(f"{name}.toml [provenance]", table)
