"""Drug classes relevant to hyponatremia (``data/drug_classes.toml``) and matching them to
medications and draft orders by generic name, RxNorm ingredient code or displayed name."""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from enum import StrEnum
from functools import cache, lru_cache
from types import MappingProxyType

from cds_service.clinical._data import (
    DataFileError,
    check_locator,
    check_source,
    cite,
    read_data_file,
    require,
)
from cds_service.clinical.context import ClinicalContext, DraftMedication, MedicationEntry

_FILE = "drug_classes.toml"

#: FHIR statuses that mean the patient is taking (or was just given) the drug.
ACTIVE_STATUSES = frozenset({"active", "in-progress", "intended", "on-hold", "completed"})
#: ``completed`` counts only for administrations (a dose given), not for finished courses.
_COMPLETED_COUNTS_FOR = frozenset({"MedicationAdministration"})


class DrugRole(StrEnum):
    ASSOCIATED = "associated"
    OSMOTIC_SOLUTE = "osmotic_solute"
    VAPTAN = "vaptan"


@dataclass(frozen=True, slots=True)
class DrugClass:
    key: str
    label: str
    role: DrugRole
    diuretic: bool
    mechanism: str
    source: str
    from_memory: bool
    rxnorm_from_memory: bool
    drugs: Mapping[str, str]  # generic name -> RxNorm ingredient code ("" if unknown)
    locator: str = ""  # where in the source the class membership stands

    def __post_init__(self) -> None:
        if not self.drugs:
            raise ValueError(f"drug class {self.key} lists no drugs")
        for name in self.drugs:
            if name != name.lower() or not name.strip():
                raise ValueError(f"drug class {self.key}: name {name!r} must be lowercase")

    @property
    def citation(self) -> str:
        return cite(self.source, self.from_memory, self.locator)


@dataclass(frozen=True, slots=True)
class DrugMatch:
    drug_class: DrugClass
    name: str  # the generic name matched
    display: str  # as recorded or ordered
    source_id: str  # e.g. "MedicationRequest/abc"


def _load_class(key: str, entry: object) -> DrugClass:
    where = f"[classes.{key}]"
    if not isinstance(entry, dict):
        raise DataFileError(f"{_FILE}: {where} must be a table")
    drugs = require(_FILE, where, entry, "drugs", dict)
    if not all(isinstance(v, str) and (v == "" or v.isdigit()) for v in drugs.values()):
        raise DataFileError(f"{_FILE}: {where} RxNorm codes must be digit strings or empty")
    try:
        role = DrugRole(require(_FILE, where, entry, "role", str))
        return DrugClass(
            key=key,
            label=require(_FILE, where, entry, "label", str),
            role=role,
            diuretic=require(_FILE, where, entry, "diuretic", bool),
            mechanism=require(_FILE, where, entry, "mechanism", str),
            source=check_source(_FILE, where, entry.get("source")),
            from_memory=require(_FILE, where, entry, "from_memory", bool),
            rxnorm_from_memory=require(_FILE, where, entry, "rxnorm_from_memory", bool),
            drugs=MappingProxyType(dict(drugs)),
            locator=check_locator(_FILE, where, entry),
        )
    except ValueError as exc:
        raise DataFileError(f"{_FILE}: {where}: {exc}") from None


@cache
def drug_classes() -> tuple[DrugClass, ...]:
    """All classes of drug_classes.toml, validated (each name and code in one class only)."""
    table = read_data_file(_FILE).get("classes")
    if not isinstance(table, dict) or not table:
        raise DataFileError(f"{_FILE}: needs [classes.<key>] tables")
    classes = tuple(_load_class(k, v) for k, v in table.items())
    seen_names: set[str] = set()
    seen_codes: set[str] = set()
    for c in classes:
        for name, code in c.drugs.items():
            if name in seen_names or (code and code in seen_codes):
                raise DataFileError(f"{_FILE}: {name} ({code}) appears in two classes")
            seen_names.add(name)
            if code:
                seen_codes.add(code)
    return classes


@cache
def _indexes() -> tuple[
    dict[str, tuple[DrugClass, str]],
    dict[str, tuple[DrugClass, str]],
    list[tuple[re.Pattern[str], DrugClass, str]],
]:
    by_name: dict[str, tuple[DrugClass, str]] = {}
    by_code: dict[str, tuple[DrugClass, str]] = {}
    patterns: list[tuple[re.Pattern[str], DrugClass, str]] = []
    for c in drug_classes():
        for name, code in c.drugs.items():
            by_name[name] = (c, name)
            if code:
                by_code[code] = (c, name)
            patterns.append((re.compile(rf"(?<![\w-]){re.escape(name)}(?![\w-])"), c, name))
    return by_name, by_code, patterns


def classify(
    names: Iterable[str], rxnorm: Iterable[str], display: str = ""
) -> list[tuple[DrugClass, str]]:
    """(class, generic name) pairs for a medication, each class once, in file order."""
    return list(_classify(tuple(names), tuple(rxnorm), display))


@lru_cache(maxsize=1024)  # pure; a chart asks about the same medications several times a call
def _classify(
    names: tuple[str, ...], rxnorm: tuple[str, ...], display: str
) -> tuple[tuple[DrugClass, str], ...]:
    by_name, by_code, patterns = _indexes()
    hits: list[tuple[DrugClass, str]] = []
    for name in names:
        if name.lower().strip() in by_name:
            hits.append(by_name[name.lower().strip()])
    hits.extend(by_code[code] for code in rxnorm if code in by_code)
    lowered = display.lower()
    hits.extend((c, n) for pattern, c, n in patterns if pattern.search(lowered))
    unique: dict[str, tuple[DrugClass, str]] = {}
    for c, n in hits:
        unique.setdefault(c.key, (c, n))
    order = {c.key: i for i, c in enumerate(drug_classes())}
    return tuple(sorted(unique.values(), key=lambda cn: order[cn[0].key]))


def match_medication(med: MedicationEntry | DraftMedication) -> list[DrugMatch]:
    source_id = med.source_id if isinstance(med, MedicationEntry) else med.resource_id
    return [
        DrugMatch(c, n, med.display, source_id)
        for c, n in classify(med.names, med.rxnorm, med.display)
    ]


def is_active(med: MedicationEntry) -> bool:
    status = med.status.lower()
    if status == "completed":
        return med.kind in _COMPLETED_COUNTS_FOR
    return status in ACTIVE_STATUSES


def active_matches(ctx: ClinicalContext, role: DrugRole) -> list[DrugMatch]:
    """Matches of the patient's active medications with classes of ``role``."""
    return [
        m
        for med in ctx.medications
        if is_active(med)
        for m in match_medication(med)
        if m.drug_class.role == role
    ]


def draft_matches(ctx: ClinicalContext, role: DrugRole) -> list[DrugMatch]:
    """Matches of the selected draft medications with classes of ``role``."""
    return [
        m
        for draft in ctx.draft_medications
        if draft.selected
        for m in match_medication(draft)
        if m.drug_class.role == role
    ]
