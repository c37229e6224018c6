"""Infusate compositions (``data/infusates.toml``) and resolving a drafted IV fluid to its
sodium + potassium content and tonicity class.

A draft names a fluid (``named_solution``), states its make-up (``nacl_percent``,
``dextrose_percent``, ``added_potassium_mmol_per_l``), or only shows a display name that
contains one of the table's aliases. Sodium from a percentage uses the molar mass of sodium
chloride (58.44 g/mol); dextrose counts as free water (it is metabolised) but adds osmolarity
(dextrose monohydrate 198.17 g/mol, as labelled).
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from enum import StrEnum
from functools import cache
from types import MappingProxyType

from cds_service.clinical._data import (
    DataFileError,
    check_locator,
    check_source,
    cite,
    read_data_file,
    require,
)
from cds_service.clinical.context import DraftFluid
from cds_service.clinical.thresholds import Thresholds, load_thresholds

_FILE = "infusates.toml"
NACL_G_PER_MOL = 58.44
DEXTROSE_MONOHYDRATE_G_PER_MOL = 198.17


class FluidTonicity(StrEnum):
    HYPOTONIC = "hypotonic"
    ISOTONIC = "isotonic"
    HYPERTONIC = "hypertonic"


def fluid_tonicity(sodium_plus_potassium: float, th: Thresholds) -> FluidTonicity:
    """Class of an infusate by its Na + K (mmol/L) against the infusate cut-offs."""
    if sodium_plus_potassium < th.infusate_hypotonic_below:
        return FluidTonicity.HYPOTONIC
    if sodium_plus_potassium > th.infusate_hypertonic_above:
        return FluidTonicity.HYPERTONIC
    return FluidTonicity.ISOTONIC


@dataclass(frozen=True, slots=True)
class Infusate:
    key: str
    label: str
    aliases: tuple[str, ...]
    sodium: float
    potassium: float
    osmolarity: float
    tonicity: FluidTonicity
    source: str
    from_memory: bool
    locator: str = ""  # where in the source the composition stands
    balanced: bool = False
    potassium_added: bool = False

    @property
    def citation(self) -> str:
        return cite(self.source, self.from_memory, self.locator)

    def __post_init__(self) -> None:
        if min(self.sodium, self.potassium) < 0 or self.osmolarity <= 0:
            raise ValueError(f"infusate {self.key}: negative content or no osmolarity")


def _flag(entry: dict, where: str, name: str) -> bool:
    value = entry.get(name, False)
    if not isinstance(value, bool):
        raise DataFileError(f"{_FILE}: {where} {name} must be true or false")
    return value


def _load(key: str, entry: object) -> Infusate:
    where = f"[infusates.{key}]"
    if not isinstance(entry, dict):
        raise DataFileError(f"{_FILE}: {where} must be a table")
    aliases = require(_FILE, where, entry, "aliases", list)
    try:
        inf = Infusate(
            key=key,
            label=require(_FILE, where, entry, "label", str),
            aliases=tuple(str(a).lower() for a in aliases),
            sodium=float(require(_FILE, where, entry, "sodium", int | float)),
            potassium=float(require(_FILE, where, entry, "potassium", int | float)),
            osmolarity=float(require(_FILE, where, entry, "osmolarity", int | float)),
            tonicity=FluidTonicity(require(_FILE, where, entry, "tonicity", str)),
            source=check_source(_FILE, where, entry.get("source")),
            from_memory=require(_FILE, where, entry, "from_memory", bool),
            locator=check_locator(_FILE, where, entry),
            balanced=_flag(entry, where, "balanced"),
            potassium_added=_flag(entry, where, "potassium_added"),
        )
    except ValueError as exc:
        raise DataFileError(f"{_FILE}: {where}: {exc}") from None
    stated = fluid_tonicity(inf.sodium + inf.potassium, load_thresholds())
    if stated != inf.tonicity:
        raise DataFileError(f"{_FILE}: {where} says {inf.tonicity}, its Na + K says {stated}")
    return inf


@cache
def infusates() -> Mapping[str, Infusate]:
    """Every infusate of the data file by key, validated."""
    table = read_data_file(_FILE).get("infusates")
    if not isinstance(table, dict) or not table:
        raise DataFileError(f"{_FILE}: needs [infusates.<key>] tables")
    return MappingProxyType({k: _load(k, v) for k, v in table.items()})


@cache
def _alias_patterns() -> tuple[tuple[re.Pattern[str], Infusate], ...]:
    pairs = [(a, inf) for inf in infusates().values() for a in inf.aliases]
    pairs.sort(key=lambda p: -len(p[0]))  # the most specific alias wins
    return tuple((re.compile(rf"(?<![\w.]){re.escape(a)}(?![\w.])"), inf) for a, inf in pairs)


@dataclass(frozen=True, slots=True)
class PotassiumSalts:
    names: tuple[str, ...]
    rxnorm: frozenset[str]

    def matches(self, names: tuple[str, ...], rxnorm: tuple[str, ...], display: str) -> bool:
        """A drafted drug is a potassium salt by RxNorm code, generic name or order text."""
        if self.rxnorm.intersection(rxnorm):
            return True
        text = " ".join([*names, display]).lower()
        return any(re.search(rf"(?<![\w]){re.escape(n)}(?![\w])", text) for n in self.names)


@cache
def potassium_salts() -> PotassiumSalts:
    """The ``[potassium_salts]`` table of the data file."""
    table = read_data_file(_FILE).get("potassium_salts")
    where = "[potassium_salts]"
    if not isinstance(table, dict):
        raise DataFileError(f"{_FILE}: needs a {where} table")
    names = require(_FILE, where, table, "names", list)
    codes = require(_FILE, where, table, "rxnorm", list)
    check_source(_FILE, where, table.get("source"))
    return PotassiumSalts(tuple(str(n).lower() for n in names), frozenset(map(str, codes)))


@dataclass(frozen=True, slots=True)
class ResolvedFluid:
    draft: DraftFluid
    label: str
    sodium: float
    potassium: float
    osmolarity: float
    tonicity: FluidTonicity
    basis: str  # how the composition was found
    balanced: bool = False  # a balanced crystalloid, not saline
    added_potassium: float = 0.0  # mmol/L of potassium chloride added (premix or order)

    @property
    def sodium_plus_potassium(self) -> float:
        return self.sodium + self.potassium

    @property
    def kind(self) -> str:
        """How the fluid is described on a card (never "saline" for a balanced solution)."""
        if self.balanced:
            return "balanced crystalloid"
        if self.sodium == 0:
            return "electrolyte-free water"
        return "sodium chloride solution"


def sodium_from_percent(nacl_percent: float) -> float:
    """mmol/L of sodium in ``nacl_percent`` % (g/100 mL) sodium chloride."""
    return nacl_percent * 10.0 / NACL_G_PER_MOL * 1000.0


def _from_table(draft: DraftFluid, inf: Infusate, basis: str, th: Thresholds) -> ResolvedFluid:
    extra_k = draft.added_potassium_mmol_per_l or 0.0
    label = inf.label if not extra_k else f"{inf.label} + {extra_k:g} mmol/L potassium"
    k = inf.potassium + extra_k
    return ResolvedFluid(
        draft,
        label,
        inf.sodium,
        k,
        inf.osmolarity + 2 * extra_k,
        fluid_tonicity(inf.sodium + k, th),
        basis,
        balanced=inf.balanced,
        added_potassium=extra_k + (inf.potassium if inf.potassium_added else 0.0),
    )


def resolve(draft: DraftFluid, th: Thresholds) -> ResolvedFluid | None:
    """Composition of a drafted fluid, or None when the order does not say enough."""
    if draft.named_solution is not None and draft.named_solution in infusates():
        return _from_table(draft, infusates()[draft.named_solution], "named solution", th)
    if draft.nacl_percent is not None or draft.dextrose_percent is not None:
        na = sodium_from_percent(draft.nacl_percent or 0.0)
        k = draft.added_potassium_mmol_per_l or 0.0
        dextrose_mosm = (draft.dextrose_percent or 0.0) * 10_000 / DEXTROSE_MONOHYDRATE_G_PER_MOL
        parts = [f"{draft.dextrose_percent:g}% dextrose"] if draft.dextrose_percent else []
        if draft.nacl_percent:
            parts.append(f"{draft.nacl_percent:g}% sodium chloride")
        if k:
            parts.append(f"{k:g} mmol/L potassium")
        return ResolvedFluid(
            draft,
            " + ".join(parts) or draft.display,
            na,
            k,
            2 * (na + k) + dextrose_mosm,
            fluid_tonicity(na + k, th),
            "stated composition",
            added_potassium=k,
        )
    lowered = draft.display.lower()
    for pattern, inf in _alias_patterns():
        if pattern.search(lowered):
            return _from_table(draft, inf, "name of the order", th)
    return None
