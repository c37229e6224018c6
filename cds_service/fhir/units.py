"""Units: record-system unit strings -> UCUM -> the analyte's canonical unit, via pint.

Conversion uses pint with ucumvert's UCUM definitions. Three clinical rules sit on top of
plain dimensional analysis, each driven by data/units.toml:

* moles <-> mass through the analyte's molar mass (glucose 180.16 g/mol ...);
* equivalents -> moles through the analyte's valence (ucumvert defines ``eq`` as ``mol``,
  which only holds for monovalent ions, so an analyte without a valence refuses ``meq``);
* osmoles are only accepted for the osmolality analytes (ucumvert defines ``osm`` as ``mol``).

Parsing and factors are cached, so a bundle of thousands of results converts in a few
multiplications.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cache, lru_cache
from typing import Any

import pint

from cds_service.clinical.context import CANONICAL_UNITS, Analyte
from cds_service.fhir._data import load

UCUM_SYSTEM = "http://unitsofmeasure.org"
_OSMOLALITY = frozenset({Analyte.OSMOLALITY, Analyte.URINE_OSMOLALITY})
_SPACES = re.compile(r"\s+")
_SLASH = re.compile(r"\s*/\s*")


class UnitProblem(ValueError):
    """A unit that is missing, unknown, or cannot be converted for the analyte."""


@dataclass(frozen=True, slots=True)
class AnalyteUnits:
    analyte: Analyte
    low: float
    high: float
    molar_mass: float | None = None  # g/mol
    valence: int | None = None
    source: str = ""

    def __post_init__(self) -> None:
        if not (math.isfinite(self.low) and math.isfinite(self.high) and self.low < self.high):
            raise ValueError(f"bad plausible range for {self.analyte}: {self.low}..{self.high}")
        if self.molar_mass is not None and self.molar_mass <= 0:
            raise ValueError(f"molar mass of {self.analyte} must be positive")
        if self.valence is not None and self.valence <= 0:
            raise ValueError(f"valence of {self.analyte} must be positive")


@cache
def registry() -> pint.UnitRegistry:
    from ucumvert import PintUcumRegistry

    return PintUcumRegistry()


@cache
def analyte_units(analyte: Analyte) -> AnalyteUnits:
    raw = load("units")["analyte"][analyte.value]
    low, high = raw["range"]
    return AnalyteUnits(
        analyte=analyte,
        low=float(low),
        high=float(high),
        molar_mass=float(raw["molar_mass"]) if "molar_mass" in raw else None,
        valence=int(raw["valence"]) if "valence" in raw else None,
        source=str(raw.get("source", "")),
    )


def solute_molar_mass(name: str) -> float:
    return float(load("units")["solute"][name]["molar_mass"])


def _key(text: str) -> str:
    return _SLASH.sub("/", _SPACES.sub(" ", text.strip().lower()))


@lru_cache(maxsize=1024)
def parse_ucum(code: str) -> Any | None:
    """The pint Quantity for a UCUM code, or None when it does not parse."""
    if not code or len(code) > 64:
        return None
    try:
        return registry().from_ucum(code)
    except Exception:  # ucumvert raises lark, pint and its own errors alike
        return None


@lru_cache(maxsize=1024)
def resolve(unit: str | None, code: str | None, system: str | None) -> str:
    """The UCUM code for a Quantity's (unit, code, system); UnitProblem when none fits.

    The code is tried first (alias table, then as UCUM when its system is UCUM or absent: a
    local code system's "MG" is not UCUM's milligram by right), then the unit text.
    """
    aliases: dict[str, str] = load("units")["aliases"]
    ucum_code = system is None or system.strip().rstrip("/") == UCUM_SYSTEM
    candidates: list[tuple[str, bool]] = []
    if code and code.strip():
        candidates.append((code.strip(), ucum_code))
    if unit and unit.strip():
        candidates.append((unit.strip(), True))
    if not candidates:
        raise UnitProblem("no unit given")
    for text, may_be_ucum in candidates:
        alias = aliases.get(_key(text))
        if alias is not None:
            return alias
        if may_be_ucum and parse_ucum(text) is not None:
            return text
    shown = unit if unit else code
    raise UnitProblem(f"unit '{shown}' is not recognised")


@lru_cache(maxsize=2048)
def _factor(analyte: Analyte, ucum: str) -> tuple[float | None, str]:
    """(factor, "") so that value_in_ucum * factor is in the canonical unit, or (None, why)."""
    canonical = CANONICAL_UNITS[analyte]
    src = parse_ucum(ucum)
    tgt = parse_ucum(canonical)
    if src is None or tgt is None:
        return None, f"unit '{ucum}' is not valid UCUM"
    info = analyte_units(analyte)
    names = [name for name, _ in src.unit_items()]
    if any("osmole" in n for n in names) and analyte not in _OSMOLALITY:
        return None, f"osmoles ('{ucum}') do not measure {analyte.value}"
    if any("equivalents" in n for n in names):
        if info.valence is None:
            return None, f"equivalents ('{ucum}') need a valence, which {analyte.value} lacks"
        src = src / info.valence
    ureg = src._REGISTRY  # from_ucum builds quantities in its own registry
    dims = src.dimensionality
    tdims = tgt.dimensionality
    if dims != tdims and info.molar_mass is not None:
        molar = ureg.Quantity(info.molar_mass, "gram / mole")
        if (src * molar).dimensionality == tdims:
            src = src * molar
        elif (src / molar).dimensionality == tdims:
            src = src / molar
    if src.dimensionality != tdims and analyte is Analyte.URINE_VOLUME_24H:
        day = ureg.Quantity(24, "hour")
        if (src * day).dimensionality == tdims:
            src = src * day
    if src.dimensionality != tdims:
        return None, f"unit '{ucum}' cannot be converted to {canonical} for {analyte.value}"
    try:
        return float(src.to(tgt.units).magnitude / tgt.magnitude), ""
    except Exception:
        return None, f"unit '{ucum}' cannot be converted to {canonical} for {analyte.value}"


def factor(analyte: Analyte, ucum: str) -> float:
    """Multiply a value in ``ucum`` by this to get the analyte's canonical unit."""
    value, why = _factor(analyte, ucum)
    if value is None:
        raise UnitProblem(why)
    return value


def to_canonical(
    analyte: Analyte,
    value: float,
    unit: str | None = None,
    code: str | None = None,
    system: str | None = None,
) -> float:
    """``value`` as sent (unit text, UCUM code, system) expressed in the canonical unit."""
    return value * factor(analyte, resolve(unit, code, system))


def from_canonical(analyte: Analyte, value: float, ucum: str) -> float:
    """Inverse of :func:`to_canonical` for a UCUM code (used by round-trip checks)."""
    return value / factor(analyte, ucum)


def plausible(analyte: Analyte, value: float) -> bool:
    info = analyte_units(analyte)
    return math.isfinite(value) and info.low <= value <= info.high


def concentration(
    numerator: tuple[float, str],
    denominator: tuple[float, str],
    target: str,
    molar_mass: float | None = None,
    valence: int | None = None,
) -> float | None:
    """A strength Ratio (value, UCUM) / (value, UCUM) in ``target`` (e.g. g/dL, mmol/L).

    Moles and mass convert through ``molar_mass``; equivalents through ``valence``.
    None when the units do not parse or do not fit.
    """
    num, den, tgt = parse_ucum(numerator[1]), parse_ucum(denominator[1]), parse_ucum(target)
    if num is None or den is None or tgt is None or denominator[0] == 0:
        return None
    if any("equivalents" in n for n, _ in num.unit_items()):
        if not valence:
            return None
        num = num / valence
    qty = (num * numerator[0]) / (den * denominator[0])
    if qty.dimensionality != tgt.dimensionality and molar_mass:
        molar = qty._REGISTRY.Quantity(molar_mass, "gram / mole")
        for candidate in (qty * molar, qty / molar):
            if candidate.dimensionality == tgt.dimensionality:
                qty = candidate
                break
    try:
        return float(qty.to(tgt.units).magnitude / tgt.magnitude)
    except Exception:
        return None
