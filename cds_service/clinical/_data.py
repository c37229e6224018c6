"""Reading the clinical data files (``clinical/data/*.toml``) once, with their citations.

Each data file is parsed on first use and cached for the life of the process. Loaders in the
modules that own a file validate its entries; this module only reads TOML, resolves the
citation keys that every entry's ``source`` names, and prints a source the way cards show it.

How a source is printed (``cite``):

- an entry checked against its text (``from_memory = false``): the full reference with its
  DOI or PMID, then the ``locator`` (section, table, recommendation or page);
- an entry not yet checked: the full reference followed by :data:`UNCHECKED_MARK`, so a
  clinician sees the reference without it being presented as verified;
- ``common practice``: a fact of the trade with no single published source.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

COMMON_PRACTICE = "common practice"
UNCHECKED_MARK = "(not yet checked against the source text)"


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


@dataclass(frozen=True, slots=True)
class Citation:
    """One entry of citations.toml."""

    key: str
    text: str  # authors, title, journal, year;volume:pages
    checked: bool  # the reference itself was seen in the publication or its index entry
    doi: str = ""
    pmid: str = ""
    url: str = ""  # for sources without DOI or PMID (a standard, a label)
    id_checked: bool = False  # the DOI / PMID / URL was seen, not recalled
    locator: str = ""  # where the reference was seen

    @property
    def reference(self) -> str:
        """The printed reference: text, then its DOI, PMID or URL when they were seen (a
        recalled identifier is not printed: a wrong one would send a reader elsewhere)."""
        return self.text.rstrip(".") + (f". {self.identifiers}" if self.id_checked else "")

    @property
    def identifiers(self) -> str:
        """DOI and PMID (or the URL when there is neither), as printed."""
        ids = []
        if self.doi:
            ids.append(f"doi:{self.doi}")
        if self.pmid:
            ids.append(f"PMID {self.pmid}")
        if self.url and not ids:
            ids.append(self.url)
        return ". ".join(ids)


def _optional_str(where: str, entry: dict[str, Any], key: str) -> str:
    value = entry.get(key, "")
    if not isinstance(value, str):
        raise DataFileError(f"{where} {key} must be a string")
    return value.strip()


@cache
def citation_table() -> dict[str, Citation]:
    """Citation key -> :class:`Citation`, from ``citations.toml`` (validated)."""
    out: dict[str, Citation] = {}
    for key, entry in read_data_file("citations.toml").items():
        where = f"citations.toml: [{key}]"
        text = entry.get("text") if isinstance(entry, dict) else None
        checked = entry.get("checked") if isinstance(entry, dict) else None
        if not isinstance(text, str) or not text or not isinstance(checked, bool):
            raise DataFileError(f"{where} needs text and checked")
        id_checked = entry.get("id_checked", False)
        if not isinstance(id_checked, bool):
            raise DataFileError(f"{where} id_checked must be true or false")
        out[key] = Citation(
            key=key,
            text=text,
            checked=checked,
            doi=_optional_str(where, entry, "doi"),
            pmid=_optional_str(where, entry, "pmid"),
            url=_optional_str(where, entry, "url"),
            id_checked=id_checked,
            locator=_optional_str(where, entry, "locator"),
        )
    return out


@cache
def citations() -> dict[str, str]:
    """Citation key -> printed reference (text with DOI or PMID)."""
    return {key: c.reference for key, c in citation_table().items()}


def check_source(file: str, where: str, source: object) -> str:
    """Validate a ``source`` field: a citation key or ``common practice``."""
    if source == COMMON_PRACTICE or (isinstance(source, str) and source in citations()):
        return source
    raise DataFileError(f"{file}: {where} has unknown source {source!r}")


def check_locator(file: str, where: str, entry: dict[str, Any]) -> str:
    """The optional ``locator`` of an entry (where in its source the figure stands)."""
    return _optional_str(f"{file}: {where}", entry, "locator")


def cite(source: str, from_memory: bool = False, locator: str = "") -> str:
    """The printed reference of a ``source`` field: with its locator when the entry was
    checked against the text, marked :data:`UNCHECKED_MARK` when it was not."""
    if source == COMMON_PRACTICE:
        return "Common practice (no single published source)"
    ref = citation_table()[source]
    if from_memory or not ref.checked:
        return f"{ref.reference} {UNCHECKED_MARK}"
    return f"{ref.reference}; {locator}" if locator else ref.reference


def require(file: str, where: str, entry: dict[str, Any], key: str, kind: type | tuple) -> Any:
    """``entry[key]`` checked against ``kind`` (bool is never accepted as a number)."""
    value = entry.get(key)
    if isinstance(value, bool) and kind is not bool:
        value = None
    if not isinstance(value, kind):
        raise DataFileError(f"{file}: {where} needs {key} of type {kind}")
    return value
