"""`tonicity knowledge`: every figure, drug class, infusate and code Tonicity relies on, with
its value, unit, source, locator and whether it was checked against the source's text.

tonicity knowledge [--json] [--unchecked]

For an integrator or a clinical governance board: what a card cites, and what still has to be
checked before the institution relies on it. Each item has one status:

- ``checked``: read in the source's own text (or, for a code, in a published listing) at the
  locator given;
- ``unchecked``: recalled, or seen only where others quote the source; cards print its
  reference marked "(not yet checked against the source text)";
- ``common practice``: a fact of the trade with no single published source.

The summary counts the three. ``--unchecked`` lists only the unchecked items (the summary still
counts everything). Exit status 0; a bad argument is a one-line error.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections import Counter
from dataclasses import asdict, dataclass
from typing import Any

CHECKED = "checked"
UNCHECKED = "unchecked"
COMMON = "common practice"
STATUSES = (CHECKED, UNCHECKED, COMMON)


@dataclass(frozen=True, slots=True)
class Item:
    file: str  # data file, relative to the package
    key: str  # entry key (threshold key, class, infusate, code ...)
    value: str
    unit: str
    source: str  # full reference, or the listing / statement of the source
    locator: str
    status: str  # one of STATUSES
    note: str = ""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--json", action="store_true", help="print JSON instead of text")
    parser.add_argument(
        "--unchecked", action="store_true", help="list only entries not yet checked"
    )


def run(args: argparse.Namespace) -> int:
    items = collect()
    summary = summarize(items)
    shown = [i for i in items if i.status == UNCHECKED] if args.unchecked else items
    if args.json:
        body = {"summary": summary, "items": [asdict(i) for i in shown]}
        json.dump(body, sys.stdout, indent=2, ensure_ascii=False)
        sys.stdout.write("\n")
    else:
        sys.stdout.write(render_text(shown, summary))
    return 0


def summarize(items: list[Item]) -> dict[str, int]:
    counts = Counter(i.status for i in items)
    return {"total": len(items), **{s: counts.get(s, 0) for s in STATUSES}}


def render_text(items: list[Item], summary: dict[str, int]) -> str:
    lines: list[str] = []
    current = None
    for i in items:
        if i.file != current:
            current = i.file
            lines += ["", f"== {i.file}"]
        unit = f" {i.unit}" if i.unit and i.unit != "1" else ""
        lines.append(f"[{i.status}] {i.key} = {i.value}{unit}")
        lines.append(f"    source: {i.source}")
        if i.locator:
            lines.append(f"    locator: {i.locator}")
        if i.note:
            lines.append(f"    note: {i.note}")
    lines += [
        "",
        f"{summary['total']} entries: {summary[CHECKED]} checked against their source, "
        f"{summary[UNCHECKED]} not yet checked, {summary[COMMON]} common practice.",
    ]
    return "\n".join(lines).lstrip("\n") + "\n"


def _status(source: str, from_memory: bool) -> str:
    from cds_service.clinical._data import COMMON_PRACTICE

    if source == COMMON_PRACTICE:
        return COMMON
    return UNCHECKED if from_memory else CHECKED


def _reference(source: str) -> str:
    from cds_service.clinical._data import COMMON_PRACTICE, citation_table

    if source == COMMON_PRACTICE:
        return "common practice (no single published source)"
    c = citation_table()[source]
    ids = c.identifiers
    if ids and not c.id_checked:
        ids += " (identifier recalled, not seen)"
    return ". ".join(p for p in (c.text.rstrip("."), ids) if p)


def _num(x: float) -> str:
    return f"{x:g}"


def collect() -> list[Item]:
    """Every entry of every clinical and FHIR data file, in file order."""
    return [
        *_thresholds(),
        *_drug_classes(),
        *_infusates(),
        *_citations(),
        *_loinc(),
        *_conditions(),
        *_units(),
        *_medications(),
        *_systems(),
        *_lookback(),
    ]


def _thresholds() -> list[Item]:
    from cds_service.clinical.thresholds import threshold_entries

    return [
        Item(
            file="clinical/data/thresholds.toml",
            key=e.key,
            value=_num(e.value),
            unit=e.unit,
            source=_reference(e.source),
            locator=e.locator,
            status=_status(e.source, e.from_memory),
            note=e.note,
        )
        for e in threshold_entries().values()
    ]


def _drug_classes() -> list[Item]:
    from cds_service.clinical.drugs import drug_classes

    out = []
    for c in drug_classes():
        out.append(
            Item(
                file="clinical/data/drug_classes.toml",
                key=c.key,
                value=f"{c.label}: {', '.join(c.drugs)}",
                unit="",
                source=_reference(c.source),
                locator=c.locator,
                status=_status(c.source, c.from_memory),
                note=f"role {c.role.value}" + (", diuretic" if c.diuretic else ""),
            )
        )
        codes = ", ".join(f"{n} {code}" for n, code in c.drugs.items() if code)
        out.append(
            Item(
                file="clinical/data/drug_classes.toml",
                key=f"{c.key} (RxNorm codes)",
                value=codes or "none",
                unit="",
                source=_reference("rxnorm"),
                locator="",
                status=UNCHECKED if c.rxnorm_from_memory else CHECKED,
            )
        )
    return out


def _infusates() -> list[Item]:
    from cds_service.clinical.infusates import infusates

    return [
        Item(
            file="clinical/data/infusates.toml",
            key=f.key,
            value=(
                f"{f.label}: sodium {_num(f.sodium)}, potassium {_num(f.potassium)} mmol/L, "
                f"osmolarity {_num(f.osmolarity)} mOsm/L, {f.tonicity.value}"
            ),
            unit="",
            source=_reference(f.source),
            locator=f.locator,
            status=_status(f.source, f.from_memory),
        )
        for f in infusates().values()
    ]


def _citations() -> list[Item]:
    from cds_service.clinical._data import citation_table

    return [
        Item(
            file="clinical/data/citations.toml",
            key=c.key,
            value=c.identifiers or "no DOI or PMID",
            unit="",
            source=c.text,
            locator=c.locator,
            status=CHECKED if c.checked else UNCHECKED,
            note="" if c.id_checked or not c.identifiers else "identifier recalled, not seen",
        )
        for c in citation_table().values()
    ]


def _loinc() -> list[Item]:
    from cds_service.fhir.loinc import entries

    return [
        Item(
            file="fhir/data/loinc.toml",
            key=e.code,
            value=e.name,
            unit="",
            source=e.source or "not stated",
            locator="",
            status=CHECKED if e.checked else UNCHECKED,
            note=f"{e.analyte.value}, {e.specimen}",
        )
        for e in entries()
    ]


def _conditions() -> list[Item]:
    from cds_service.fhir import provenance
    from cds_service.fhir._data import load

    data = load("conditions")
    out = []
    for key, p in provenance.conditions().items():
        entry = data[key]
        codes = [*(f"SNOMED CT {c}" for c in entry.get("snomed", []))]
        codes += [f"ICD-10-CM {c}" for c in entry.get("icd10cm", [])]
        out.append(
            Item(
                file="fhir/data/conditions.toml",
                key=key,
                value=", ".join(codes),
                unit="",
                source=p.source,
                locator=p.locator,
                status=COMMON if p.common_practice else (CHECKED if p.checked else UNCHECKED),
            )
        )
    return out


def _units() -> list[Item]:
    from cds_service.clinical.context import CANONICAL_UNITS, Analyte
    from cds_service.fhir import provenance
    from cds_service.fhir._data import load

    data = load("units")["analyte"]
    out = []
    for key, p in provenance.units().items():
        raw: dict[str, Any] = data[key]
        low, high = raw["range"]
        value = f"plausible {_num(low)}-{_num(high)}"
        if "molar_mass" in raw:
            value += f"; molar mass {_num(raw['molar_mass'])} g/mol"
        # A plausible range is a fact of the trade; a molar mass is a standard constant. The
        # entry is unchecked only where its source says a figure was recalled.
        recalled = "from memory" in p.source
        status = CHECKED if p.checked else (UNCHECKED if recalled else COMMON)
        out.append(
            Item(
                file="fhir/data/units.toml",
                key=key,
                value=value,
                unit=CANONICAL_UNITS.get(Analyte(key), ""),
                source=p.source,
                locator=p.locator,
                status=status,
            )
        )
    return out


def _file_items(name: str, table: str, label: str) -> list[Item]:
    from cds_service.fhir import provenance
    from cds_service.fhir._data import load

    p = provenance.file_level(name)
    status = COMMON if p.common_practice else (CHECKED if p.checked else UNCHECKED)
    return [
        Item(
            file=f"fhir/data/{name}.toml",
            key=str(key),
            value=str(value),
            unit=label,
            source=p.source,
            locator=p.locator,
            status=status,
        )
        for key, value in load(name)[table].items()
    ]


def _medications() -> list[Item]:
    return _file_items("medications", "rxnorm_ingredients", "")


def _systems() -> list[Item]:
    return _file_items("systems", "aliases", "")


def _lookback() -> list[Item]:
    return _file_items("lookback", "lookback_hours", "h")
