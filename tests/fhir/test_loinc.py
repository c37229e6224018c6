"""The LOINC map (data/loinc.toml) and its two lookups."""

from __future__ import annotations

import pytest

from cds_service.clinical.context import Analyte
from cds_service.fhir import loinc


def _loinc_check_digit(body: str) -> int:
    """LOINC's Mod 10 check digit (Regenstrief, LOINC Users' Guide, "Calculating Mod 10
    check digits"): double every other digit from the right, add the digits, round up to ten.
    """
    total = 0
    for i, ch in enumerate(reversed(body)):
        d = int(ch) * (2 if i % 2 == 0 else 1)
        total += d // 10 + d % 10
    return (10 - total % 10) % 10


def test_every_entry_has_long_name_analyte_specimen_and_source() -> None:
    for entry in loinc.entries():
        assert len(entry.name) > 5, entry
        assert isinstance(entry.analyte, Analyte)
        assert entry.specimen
        assert entry.source, f"{entry.code} has no source (say what is known if unchecked)"


@pytest.mark.parametrize("entry", loinc.entries(), ids=lambda e: e.code)
def test_check_digit_is_valid(entry: loinc.LoincEntry) -> None:
    # LOINC Users' Guide (Regenstrief): the digit after the hyphen is a Mod 10 check digit;
    # a typo in a code written from memory almost always breaks it.
    body, check = entry.code.split("-")
    assert _loinc_check_digit(body) == int(check)


def test_check_digit_rule_on_published_codes() -> None:
    # Codes quoted in HL7 US Core examples: 2951-2 serum sodium, 29463-7 body weight.
    assert _loinc_check_digit("2951") == 2
    assert _loinc_check_digit("29463") == 7
    assert _loinc_check_digit("2951") != 3


def test_every_analyte_is_mapped_with_exactly_one_primary_code() -> None:
    for analyte in Analyte:
        mapped = [e for e in loinc.entries() if e.analyte == analyte]
        assert mapped, f"no LOINC code for {analyte}"
        assert sum(e.primary for e in mapped) == 1, analyte


def test_codes_are_unique() -> None:
    codes = [e.code for e in loinc.entries()]
    assert len(codes) == len(set(codes))


def test_codes_for_and_primary_code() -> None:
    sodium = loinc.codes_for(Analyte.SODIUM)
    assert {"2951-2", "2947-0", "32717-1", "39791-9"} <= set(sodium)
    both = loinc.codes_for(Analyte.GLUCOSE, Analyte.UREA_NITROGEN)
    assert {"2345-7", "14749-6", "3094-0", "22664-7"} <= set(both)
    assert not set(both) & set(sodium)
    assert loinc.primary_code(Analyte.OSMOLALITY) == ("2692-2", "Osmolality of Serum or Plasma")
    assert loinc.primary_code(Analyte.BODY_WEIGHT)[0] == "29463-7"
    assert loinc.primary_code(Analyte.BODY_HEIGHT)[0] == "8302-2"


def test_blood_gas_sodium_is_flagged_direct_ise_and_serum_is_not() -> None:
    assert loinc.lookup("32717-1").direct_ise  # arterial blood
    assert loinc.lookup("2947-0").direct_ise  # whole blood
    assert not loinc.lookup("2951-2").direct_ise  # serum/plasma (indirect ISE in most labs)
    assert loinc.lookup("0000-0") is None


def test_every_primary_entry_has_a_short_order_name() -> None:
    # Order buttons carry a clinician's name for the test, not the LOINC long name
    # (common practice: record systems show short orderable names).
    for entry in loinc.entries():
        if entry.primary:
            assert entry.short, entry.code
            assert "[" not in entry.short and "/volume" not in entry.short, entry.short
    assert loinc.order_name(Analyte.URINE_SODIUM) == "urine sodium (spot)"
    assert loinc.order_name(Analyte.TSH) == "TSH"


def test_mixed_venous_sodium_has_its_published_long_name() -> None:
    # LOINC v2.70 display of 41657-8 "Sodium [Moles/volume] in Mixed venous blood", as listed
    # in the FSH ValueSet "Sodium" of The-Ronin-Project/infx-fhir-profile OncologyTestData.fsh
    # (an earlier version); capillary blood sodium is a different code (39792-7 in the same
    # listing). The map had called 41657-8 capillary.
    entry = loinc.lookup("41657-8")
    assert entry is not None and entry.checked
    assert entry.name == "Sodium [Moles/volume] in Mixed venous blood"
    assert entry.specimen == "mixed venous blood" and entry.analyte is Analyte.SODIUM
