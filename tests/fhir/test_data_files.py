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
