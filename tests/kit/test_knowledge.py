"""The knowledge base is honest about its sources, and `tonicity knowledge` reports it.

Rules checked here (the project's own rules for data files, see DEVELOPERS.md "Adding
knowledge"): every entry is checked at a locator, common practice, or marked unchecked; a
checked entry names where it was read and cites a reference that was itself seen; every
citation key used in code or data exists; and no card shown to a clinician says "from memory".
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest

from cds_service.cli import main
from cds_service.clinical._data import COMMON_PRACTICE, UNCHECKED_MARK, citation_table, cite
from cds_service.clinical.drugs import drug_classes
from cds_service.clinical.infusates import infusates
from cds_service.clinical.thresholds import threshold_entries
from cds_service.commands.knowledge import CHECKED, COMMON, STATUSES, UNCHECKED, collect
from cds_service.fhir import provenance
from cds_service.fhir.loinc import entries as loinc_entries

from .conftest import SAMPLES, manifest_samples

PACKAGE = Path(__file__).resolve().parents[2] / "cds_service"


def _clinical_entries() -> list[tuple[str, str, bool, str]]:
    """(where, source, from_memory, locator) of every thresholds / drug class / infusate entry."""
    out = [
        (f"threshold {e.key}", e.source, e.from_memory, e.locator)
        for e in threshold_entries().values()
    ]
    out += [(f"drug class {c.key}", c.source, c.from_memory, c.locator) for c in drug_classes()]
    out += [(f"infusate {f.key}", f.source, f.from_memory, f.locator) for f in infusates().values()]
    return out


def test_every_clinical_entry_is_checked_at_a_locator_common_practice_or_unchecked() -> None:
    for where, source, from_memory, locator in _clinical_entries():
        if source == COMMON_PRACTICE or from_memory:
            continue  # a fact of the trade, or listed as unchecked
        assert locator, f"{where} is marked checked (from_memory = false) but has no locator"


def test_a_checked_entry_cites_a_reference_that_was_itself_seen() -> None:
    # A figure cannot have been read in a text whose reference was not seen.
    for where, source, from_memory, _ in _clinical_entries():
        if source != COMMON_PRACTICE and not from_memory:
            assert citation_table()[source].checked, f"{where} cites unchecked {source}"


def test_checked_citations_and_codes_say_where_they_were_read() -> None:
    for c in citation_table().values():
        assert not c.checked or c.locator, f"citation {c.key} checked without a locator"
        assert not c.id_checked or c.identifiers, f"citation {c.key}: id_checked, no id"
    for e in loinc_entries():
        assert not e.checked or e.source, f"LOINC {e.code} checked without a listing"
    tables = [*provenance.conditions().values(), *provenance.units().values()]
    tables += [provenance.file_level(n) for n in ("medications", "systems", "lookback")]
    for p in tables:
        assert not p.checked or p.source or p.locator


def test_every_citation_key_used_in_data_or_code_exists() -> None:
    used = {source for _, source, _, _ in _clinical_entries()} - {COMMON_PRACTICE}
    used.add("rxnorm")  # the knowledge report cites it for every class's RxNorm codes
    literal = re.compile(r"""(?<![\w.])cite\(\s*["']([a-z0-9_]+)["']""")
    for path in PACKAGE.rglob("*.py"):
        used |= set(literal.findall(path.read_text(encoding="utf-8")))
    assert used <= set(citation_table()), sorted(used - set(citation_table()))
    # and every threshold key cited by a rule (th.cite("key")) is a threshold
    by_key = re.compile(r"""\.cite\(\s*["']([a-z0-9_]+)["']""")
    keys: set[str] = set()
    for path in PACKAGE.rglob("*.py"):
        keys |= set(by_key.findall(path.read_text(encoding="utf-8")))
    assert keys <= set(threshold_entries()), sorted(keys - set(threshold_entries()))


def test_printed_sources_are_full_references_never_from_memory() -> None:
    # Fenske et al. 2008, J Clin Endocrinol Metab 93:2991-2997, Abstract (Results): the 12 %
    # fractional urate excretion cut-off, read there; its PMID was seen (18477658).
    checked = threshold_entries()["siadh_fe_urate_above"]
    printed = checked.citation
    assert "J Clin Endocrinol Metab 2008;93(8):2991-2997" in printed
    assert "PMID 18477658" in printed and checked.locator in printed
    assert UNCHECKED_MARK not in printed
    # An entry not read in its source's own text keeps its reference, marked plainly.
    unchecked = next(
        e for e in threshold_entries().values() if e.from_memory and e.source != COMMON_PRACTICE
    )
    assert unchecked.citation.endswith(UNCHECKED_MARK)
    for key in citation_table():
        for from_memory in (False, True):
            assert "memory" not in cite(key, from_memory, "a locator").lower()
    assert "memory" not in cite(COMMON_PRACTICE, True).lower()


def _samples() -> list[dict[str, Any]]:
    return manifest_samples()


@pytest.mark.parametrize("sample", _samples(), ids=lambda s: s["file"])
def test_no_card_of_any_sample_says_from_memory(sample: dict[str, Any], capsys: Any) -> None:
    argv = ["evaluate", str(SAMPLES / sample["file"]), "--now", sample["now"]]
    if sample["kind"] == "bundle":
        argv += ["--hook", sample["hook"]]
    assert main(argv) == 0
    out = capsys.readouterr().out
    assert "from memory" not in out.lower()
    for card in json.loads(out)["cards"]:
        for line in card.get("detail", "").splitlines():
            if UNCHECKED_MARK in line:  # an unchecked source keeps its full reference
                assert re.search(r"\b(19|20)\d\d\b", line), line


def test_knowledge_report_lists_every_entry_with_a_status(capsys: Any) -> None:
    items = collect()
    assert {i.status for i in items} <= set(STATUSES)
    files = {i.file for i in items}
    assert {"clinical/data/thresholds.toml", "fhir/data/loinc.toml"} <= files
    assert len([i for i in items if i.file.endswith("thresholds.toml")]) == len(threshold_entries())
    assert main(["knowledge"]) == 0
    out = capsys.readouterr().out
    summary = out.strip().splitlines()[-1]
    n = {s: sum(i.status == s for i in items) for s in STATUSES}
    assert summary == (
        f"{len(items)} entries: {n[CHECKED]} checked against their source, "
        f"{n[UNCHECKED]} not yet checked, {n[COMMON]} common practice."
    )
    assert "[checked] hillier_factor = 2.4 mmol/L" in out


def test_knowledge_json_and_unchecked_filter(capsys: Any) -> None:
    assert main(["knowledge", "--json", "--unchecked"]) == 0
    body = json.loads(capsys.readouterr().out)
    assert body["items"] and all(i["status"] == UNCHECKED for i in body["items"])
    s = body["summary"]
    assert s["total"] == s[CHECKED] + s[UNCHECKED] + s[COMMON] and s[UNCHECKED] == len(
        body["items"]
    )
    keys = {i["key"] for i in body["items"]}
    assert "hillier_factor" not in keys and "katz_factor" in keys


def test_knowledge_bad_argument_is_one_line(capsys: Any) -> None:
    with pytest.raises(SystemExit) as exc:
        main(["knowledge", "--bogus"])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--bogus" in err
