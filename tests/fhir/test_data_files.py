"""The FHIR layer's data files: every key names something real, every group has a source."""

from __future__ import annotations

from cds_service.clinical.context import Analyte, ConditionCategory
from cds_service.fhir._data import load


def test_lookback_keys_are_analytes_with_positive_hours() -> None:
    for name, hours in load("lookback")["lookback_hours"].items():
        assert Analyte(name) and hours > 0


def test_units_file_covers_exactly_the_analytes_and_cites_sources() -> None:
    table = load("units")["analyte"]
    assert set(table) == {a.value for a in Analyte}
    assert all(entry["source"] for entry in table.values())


def test_condition_sets_cover_every_category_with_codes_and_source() -> None:
    data = load("conditions")
    assert set(data) == {c.value for c in ConditionCategory}
    for entry in data.values():
        assert entry["source"] and (entry["snomed"] or entry["icd10cm"])
        assert all(code.isdigit() for code in entry["snomed"])  # SNOMED CT ids are digits


def test_rxnorm_names_are_lowercase_generics() -> None:
    for code, name in load("medications")["rxnorm_ingredients"].items():
        assert code.isdigit() and name == name.lower() and name.strip() == name


def _verhoeff_valid(number: str) -> bool:
    """Verhoeff check (SNOMED CT Technical Implementation Guide: the last digit of every SCTID
    is a Verhoeff check digit). Tables built from the dihedral group D5 and the permutation
    (1 5 7 6 2 8 3 0 9 4), as in Verhoeff (1969)."""

    def d(j: int, k: int) -> int:  # multiplication in D5, elements 0-4 rotations, 5-9 flips
        if j < 5 and k < 5:
            return (j + k) % 5
        if j < 5:
            return 5 + (j + k - 5) % 5
        if k < 5:
            return 5 + (j - 5 - k) % 5
        return (j - k) % 5

    p = [list(range(10)), [1, 5, 7, 6, 2, 8, 3, 0, 9, 4]]
    for i in range(2, 8):
        p.append([p[i - 1][p[1][j]] for j in range(10)])
    c = 0
    for i, ch in enumerate(reversed(number)):
        c = d(c, p[i % 8][int(ch)])
    return c == 0


def test_verhoeff_rule_on_published_examples() -> None:
    # Verhoeff worked example (236 -> check digit 3) and SCTIDs from HL7 US Core examples
    assert _verhoeff_valid("2363") and not _verhoeff_valid("2364")
    assert _verhoeff_valid("38341003")  # hypertensive disorder
    assert _verhoeff_valid("44054006")  # type 2 diabetes mellitus
    assert not _verhoeff_valid("38341004")


def test_every_snomed_id_has_a_valid_check_digit() -> None:
    bad = [
        (category, code)
        for category, entry in load("conditions").items()
        for code in entry["snomed"]
        if not _verhoeff_valid(code)
    ]
    assert bad == []


def test_drug_class_codes_agree_with_the_fhir_medication_vocabulary() -> None:
    """A code in drug_classes.toml (RxNorm ingredient or WHO ATC) must name the same generic in
    fhir/data/medications.toml, which turns codes into names; otherwise a coded order would
    silently miss its class."""
    import tomllib
    from importlib import resources

    text = resources.files("cds_service.clinical").joinpath("data", "drug_classes.toml")
    classes = tomllib.loads(text.read_text("utf-8"))["classes"]
    meds = load("medications")
    rxnorm, atc = meds["rxnorm_ingredients"], meds["atc_ingredients"]
    for key, entry in classes.items():
        for name, code in entry["drugs"].items():
            if code:
                assert rxnorm.get(code) == name, (key, name, code)
        for name, code in entry.get("atc", {}).items():
            assert name in entry["drugs"], (key, name)
            assert atc.get(code) == name, (key, name, code)
    assert set(atc["checked"]) <= {k for k, v in atc.items() if isinstance(v, str)}


def test_fluid_codes_name_a_composition_the_parser_reads() -> None:
    from cds_service.fhir.fluids import parse_text

    for code, entry in load("fluids")["rxnorm_products"].items():
        assert code.isdigit() and entry["source"] and isinstance(entry["checked"], bool)
        assert parse_text(entry["name"]).is_fluid, code
