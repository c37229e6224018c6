"""The LOINC map (data/loinc.toml): which code feeds which analyte."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

from cds_service.clinical.context import Analyte
from cds_service.fhir._data import load

LOINC_SYSTEM = "http://loinc.org"


@dataclass(frozen=True, slots=True)
class LoincEntry:
    code: str
    name: str
    analyte: Analyte
    specimen: str
    direct_ise: bool = False
    primary: bool = False
    short: str = ""  # plain name for an order button (primary entries)
    source: str = ""  # the listing where code and long name were read, or what is known
    checked: bool = False  # code and long name read together at `source`

    def __post_init__(self) -> None:
        if not self.code or not self.name:
            raise ValueError(f"LOINC entry needs a code and a long name: {self!r}")
        if not isinstance(self.checked, bool):
            raise ValueError(f"LOINC entry {self.code}: checked must be true or false")
        if self.checked and not self.source:
            raise ValueError(f"LOINC entry {self.code}: checked needs the listing in source")


@cache
def entries() -> tuple[LoincEntry, ...]:
    """Every entry of data/loinc.toml, in file order."""
    out = []
    for raw in load("loinc")["entry"]:
        out.append(
            LoincEntry(
                code=str(raw["code"]),
                name=str(raw["name"]),
                analyte=Analyte(raw["analyte"]),
                specimen=str(raw["specimen"]),
                direct_ise=bool(raw.get("direct_ise", False)),
                primary=bool(raw.get("primary", False)),
                short=str(raw.get("short", "")),
                source=str(raw.get("source", "")),
                checked=raw.get("checked", False),
            )
        )
    return tuple(out)


@cache
def _by_code() -> dict[str, LoincEntry]:
    table: dict[str, LoincEntry] = {}
    for entry in entries():
        if entry.code in table:
            raise ValueError(f"LOINC code {entry.code} listed twice in loinc.toml")
        table[entry.code] = entry
    return table


def lookup(code: str) -> LoincEntry | None:
    """The entry for one LOINC code, or None when Tonicity does not read that code."""
    return _by_code().get(code.strip())


def codes_for(*analytes: Analyte) -> list[str]:
    """LOINC codes mapped to any of ``analytes`` (file order), e.g. for prefetch templates."""
    wanted = set(analytes)
    return [e.code for e in entries() if e.analyte in wanted]


def order_name(analyte: Analyte) -> str:
    """The plain name a clinician reads when ``analyte`` is proposed for ordering."""
    for entry in entries():
        if entry.analyte == analyte and entry.primary:
            return entry.short or entry.name
    return analyte.value.replace("_", " ")


def primary_code(analyte: Analyte) -> tuple[str, str]:
    """(code, long name) to use when suggesting that ``analyte`` be ordered."""
    for entry in entries():
        if entry.analyte == analyte and entry.primary:
            return entry.code, entry.name
    raise KeyError(f"no primary LOINC code for {analyte}")
