"""Display units: conventional or SI in card text, canonical UCUM in machine fields.

Sources: molar masses from IUPAC standard atomic weights (C 12.011, H 1.008, N 14.007,
O 15.999, I 126.904); the factor arithmetic (mg/dL -> mmol/L is 10 / M) is the definition of
the units (common practice). Worked examples checked: creatinine 1 mg/dL = 88.4 umol/L and
glucose 18 mg/dL = 1.0 mmol/L, the conversions printed on laboratory reports (common practice).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical._data import read_data_file
from cds_service.clinical.context import CANONICAL_UNITS, Analyte, DisplayUnits
from cds_service.clinical.notes import HUMAN_UNITS, display_value, human_unit, qty, si_units
from cds_service.config import load_settings
from cds_service.errors import UserError

SI = DisplayUnits.SI
_ATOMS = {"C": 12.011, "H": 1.008, "N": 14.007, "O": 15.999, "I": 126.904}
_FORMULAS = {  # molar mass re-derived from the formula (IUPAC atomic weights)
    "glucose": {"C": 6, "H": 12, "O": 6},
    "creatinine": {"C": 4, "H": 7, "N": 3, "O": 1},
    "uric_acid": {"C": 5, "H": 4, "N": 4, "O": 3},
    "cortisol": {"C": 21, "H": 30, "O": 5},
    "free_t4": {"C": 15, "H": 11, "I": 4, "N": 1, "O": 4},
    "ethanol": {"C": 2, "H": 6, "O": 1},
    "urea_nitrogen": {"N": 2},
}


@pytest.mark.parametrize("analyte", sorted(_FORMULAS))
def test_molar_masses_follow_from_the_formula(analyte: str) -> None:
    entry = read_data_file("display_units.toml")["si"][analyte]
    mass = sum(_ATOMS[a] * n for a, n in _FORMULAS[analyte].items())
    assert entry["molar_mass"] == pytest.approx(mass, rel=1e-3)


def test_every_factor_is_a_power_of_ten_over_its_molar_mass() -> None:
    for key, entry in read_data_file("display_units.toml")["si"].items():
        if "molar_mass" in entry:
            scaled = entry["factor"] * entry["molar_mass"]
            assert scaled == pytest.approx(10 ** round(math.log10(scaled)), rel=2e-3), key


def test_worked_conversions() -> None:
    assert si_units()[Analyte.CREATININE].factor == pytest.approx(88.4, abs=0.05)
    assert qty(1.13, Analyte.CREATININE, SI) == "99.9 µmol/L"  # 3 digits in, 3 out
    assert qty(1.0, Analyte.CREATININE, SI) == "88 µmol/L"  # "1" has one: shown with two
    assert qty(18.0, Analyte.GLUCOSE, SI) == "1 mmol/L"  # 0.999 to two significant digits
    assert qty(6.8, Analyte.TOTAL_PROTEIN, SI) == "68 g/L"
    assert qty(12.5, Analyte.CORTISOL, SI) == "345 nmol/L"


def test_conventional_is_the_canonical_unit_spelled_as_clinicians_write_it() -> None:
    assert qty(12.5, Analyte.CORTISOL) == "12.5 µg/dL"
    assert qty(2.1, Analyte.TSH, SI) == "2.1 mIU/L"  # no SI change for TSH
    assert qty(270, Analyte.OSMOLALITY, SI) == "270 mOsm/kg"


def test_one_spelling_for_every_unit_a_card_can_print() -> None:
    shown = set(CANONICAL_UNITS.values()) | {s.unit for s in si_units().values()}
    assert shown <= set(HUMAN_UNITS)
    assert human_unit("ug/dL") == "µg/dL" and human_unit("umol/L") == "µmol/L"


def _significant(text: str) -> int:
    digits = text.replace(".", "").lstrip("0")
    return len(digits.rstrip("0")) if "." not in text else len(digits)


@given(
    analyte=st.sampled_from(sorted(si_units())),
    value=st.decimals(min_value="0.1", max_value="999", places=1).map(float),
)
def test_no_false_precision(analyte: Analyte, value: float) -> None:
    # law: the SI number never carries more significant digits than the value it came from
    # (at least two)
    sent = f"{value:g}"
    shown = qty(value, analyte, SI).split()[0]
    assert _significant(shown) <= max(len(sent.replace(".", "").lstrip("0")), 2)
    converted, _ = display_value(value, analyte, SI)
    assert converted == pytest.approx(value * si_units()[analyte].factor, rel=0.06)


def test_config_key_selects_si_and_refuses_other_values(tmp_path) -> None:
    good = tmp_path / "si.toml"
    good.write_text('[display]\nunits = "si"\n', encoding="utf-8")
    assert load_settings(good).display.units == "si"
    assert load_settings(None).display.units == "conventional"
    bad = tmp_path / "bad.toml"
    bad.write_text('[display]\nunits = "metric"\n', encoding="utf-8")
    with pytest.raises(UserError):
        load_settings(bad)
