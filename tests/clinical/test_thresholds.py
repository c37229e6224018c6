"""Thresholds: file values, overrides, validation; data files: every entry sourced."""

from __future__ import annotations

import pytest

from cds_service.clinical._data import COMMON_PRACTICE, citations, read_data_file
from cds_service.clinical.drugs import DrugRole, drug_classes
from cds_service.clinical.infusates import fluid_tonicity, infusates
from cds_service.clinical.thresholds import load_thresholds, threshold_entries


def test_guideline_defaults() -> None:
    th = load_thresholds()
    # Spasovski 2014 (from memory): bands 130-134 / 125-129 / < 125; tonicity 275 / 295.
    assert (th.severity_mild_lower, th.severity_moderate_lower) == (130, 125)
    assert (th.tonicity_hypotonic_below, th.tonicity_hypertonic_above) == (275, 295)
    # Verbalis 2013 (from memory): 10 per 24 h, 18 per 48 h, 8 per 24 h at high risk.
    assert (th.correction_limit_24h, th.correction_limit_48h) == (10, 18)
    assert th.correction_limit_24h_high_risk == 8
    assert th.high_risk_sodium_at_most == 105


def test_override_applies_and_leaves_the_default_alone() -> None:
    strict = load_thresholds({"correction_limit_24h": 8, "correction_limit_48h": 16})
    assert strict.correction_limit_24h == 8.0
    assert isinstance(strict.correction_limit_24h, float)
    assert load_thresholds().correction_limit_24h == 10


def test_unknown_override_key_is_rejected() -> None:
    with pytest.raises(ValueError, match="unknown clinical threshold"):
        load_thresholds({"correction_limit_25h": 8})


@pytest.mark.parametrize(
    "bad",
    [
        {"correction_limit_24h": 20},  # above the 48-h limit
        {"severity_mild_lower": 120},  # below the moderate band
        {"tbw_fraction_adult_male": 1.5},
        {"katz_factor": -1},
        {"katz_factor": float("nan")},
        {"katz_factor": True},
    ],
)
def test_inconsistent_override_is_rejected(bad: dict[str, float]) -> None:
    with pytest.raises(ValueError):
        load_thresholds(bad)


def test_load_is_cached() -> None:
    assert load_thresholds() is load_thresholds()


def test_every_threshold_has_unit_and_source() -> None:
    for entry in threshold_entries().values():
        assert entry.unit
        assert entry.source == COMMON_PRACTICE or entry.source in citations()
        assert entry.citation


def test_data_files_open_with_a_syntax_header() -> None:
    from importlib import resources

    for name in ("thresholds.toml", "drug_classes.toml", "infusates.toml", "citations.toml"):
        text = resources.files("cds_service.clinical").joinpath("data", name).read_text()
        assert text.startswith("#") and "Syntax" in text.split("\n\n")[0] + text[:1500]
        assert read_data_file(name)


def test_drug_classes_cover_the_issue_list() -> None:
    names = {n for c in drug_classes() for n in c.drugs}
    # Liamis 2008 (from memory): classes associated with hyponatremia.
    for drug in (
        "hydrochlorothiazide",
        "sertraline",
        "venlafaxine",
        "amitriptyline",
        "carbamazepine",
        "oxcarbazepine",
        "haloperidol",
        "desmopressin",
        "cyclophosphamide",
        "vincristine",
        "cisplatin",
        "tramadol",
        "omeprazole",
        "ibuprofen",
        "mdma",
    ):
        assert drug in names, drug
    vaptans = [c for c in drug_classes() if c.role is DrugRole.VAPTAN]
    assert {n for c in vaptans for n in c.drugs} == {"tolvaptan", "conivaptan"}
    assert all(c.rxnorm_from_memory for c in drug_classes())


def test_infusate_classes_match_their_sodium_plus_potassium() -> None:
    th = load_thresholds()
    table = infusates()
    # Adrogué & Madias 2000 (from memory): 0.45 % saline and D5W are hypotonic, 0.9 % and
    # lactated Ringer's isotonic, 3 % hypertonic.
    expected = {
        "nacl_0_45": "hypotonic",
        "d5w": "hypotonic",
        "d5_nacl_0_45": "hypotonic",
        "nacl_0_9": "isotonic",
        "lactated_ringers": "isotonic",
        "nacl_3": "hypertonic",
    }
    for key, tonicity in expected.items():
        assert table[key].tonicity == tonicity
        assert fluid_tonicity(table[key].sodium + table[key].potassium, th) == tonicity


def test_malformed_entries_are_rejected_on_load() -> None:
    from cds_service.clinical._data import DataFileError
    from cds_service.clinical.drugs import _load_class
    from cds_service.clinical.infusates import _load

    good_class = {
        "label": "x",
        "role": "associated",
        "diuretic": False,
        "mechanism": "m",
        "source": "liamis2008",
        "from_memory": True,
        "rxnorm_from_memory": True,
        "drugs": {"sertraline": "36437"},
    }
    assert _load_class("ok", good_class).drugs["sertraline"] == "36437"
    for bad in (
        {"drugs": {"Sertraline": "36437"}},
        {"drugs": {"x": "R123"}},
        {"role": "cause"},
        {"source": "nobody2020"},
        {"diuretic": "no"},
    ):
        with pytest.raises(DataFileError):
            _load_class("bad", {**good_class, **bad})
    good_fluid = {
        "label": "x",
        "aliases": [],
        "sodium": 77,
        "potassium": 0,
        "osmolarity": 154,
        "tonicity": "hypotonic",
        "source": "common practice",
        "from_memory": True,
    }
    assert _load("ok", good_fluid).sodium == 77
    for bad in ({"tonicity": "isotonic"}, {"sodium": -1}, {"osmolarity": "high"}):
        with pytest.raises(DataFileError):
            _load("bad", {**good_fluid, **bad})


def test_common_practice_citation_reads_plainly() -> None:
    # A fact of the trade has no text to check against: it reads the same either way, and a
    # card never says "from memory" (the knowledge report lists what is unchecked).
    from cds_service.clinical._data import cite

    assert cite("common practice") == "Common practice (no single published source)"
    assert cite("common practice", from_memory=True) == cite("common practice")
