"""Unit conversion, checked against pint's own default registry (the reference library)."""

from __future__ import annotations

import math

import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import CANONICAL_UNITS, Analyte
from cds_service.fhir import units
from cds_service.fhir._data import load

REF = pint.UnitRegistry()  # pint's default definitions, independent of ucumvert's UCUM table
Q = REF.Quantity
UCUM = "http://unitsofmeasure.org"


def mass_from_molar(value: float, unit: str, molar_mass: float, target: str) -> float:
    """pint's answer for moles -> mass: value * unit * molar mass, in ``target``."""
    return float((Q(value, unit) * Q(molar_mass, "g/mol")).to(target).magnitude)


@pytest.mark.parametrize(
    ("analyte", "unit", "pint_unit", "molar_mass"),
    [
        (Analyte.GLUCOSE, "mmol/L", "mmol/L", 180.16),
        (Analyte.UREA_NITROGEN, "mmol/L", "mmol/L", 28.014),
        (Analyte.CREATININE, "umol/L", "umol/L", 113.12),
        (Analyte.URIC_ACID, "umol/L", "umol/L", 168.11),
        (Analyte.CORTISOL, "nmol/L", "nmol/L", 362.46),
        (Analyte.TRIGLYCERIDES, "mmol/L", "mmol/L", 885.4),
        (Analyte.URINE_CREATININE, "mmol/L", "mmol/L", 113.12),
    ],
)
def test_molar_to_mass_matches_pint(
    analyte: Analyte, unit: str, pint_unit: str, molar_mass: float
) -> None:
    # pint (reference library): n [mol/L] x M [g/mol] = mass concentration.
    canonical = {"mg/dL": "mg/dL", "ug/dL": "ug/dL"}[CANONICAL_UNITS[analyte]]
    for value in (0.5, 7.0, 123.0):
        expected = mass_from_molar(value, pint_unit, molar_mass, canonical)
        assert units.to_canonical(analyte, value, unit=unit) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(
    ("analyte", "unit", "pint_from", "pint_to"),
    [
        (Analyte.BODY_WEIGHT, "lb", "lb", "kg"),
        (Analyte.BODY_WEIGHT, "[lb_av]", "lb", "kg"),
        (Analyte.BODY_WEIGHT, "g", "g", "kg"),
        (Analyte.BODY_HEIGHT, "in", "inch", "cm"),
        (Analyte.BODY_HEIGHT, "m", "m", "cm"),
        (Analyte.URINE_VOLUME_24H, "mL", "mL", "L"),
        (Analyte.TOTAL_PROTEIN, "g/L", "g/L", "g/dL"),
        (Analyte.SODIUM, "umol/mL", "umol/mL", "mmol/L"),
    ],
)
def test_plain_conversions_match_pint(
    analyte: Analyte, unit: str, pint_from: str, pint_to: str
) -> None:
    for value in (1.0, 70.0, 165.5):
        expected = float(Q(value, pint_from).to(pint_to).magnitude)
        assert units.to_canonical(analyte, value, unit=unit) == pytest.approx(expected, rel=1e-9)


def test_clinical_rules_of_thumb() -> None:
    # common practice: glucose mg/dL = mmol/L x 18; creatinine 88.4 umol/L = 1 mg/dL;
    # urea 1 mmol/L = 2.8 mg/dL urea nitrogen; cortisol 27.6 nmol/L = 1 ug/dL.
    assert units.to_canonical(Analyte.GLUCOSE, 10, unit="mmol/L") == pytest.approx(180, rel=0.01)
    assert units.to_canonical(Analyte.CREATININE, 88.4, unit="umol/L") == pytest.approx(1, rel=0.01)
    assert units.to_canonical(Analyte.UREA_NITROGEN, 10, unit="mmol/L") == pytest.approx(
        28, rel=0.01
    )
    assert units.to_canonical(Analyte.CORTISOL, 276, unit="nmol/L") == pytest.approx(10, rel=0.01)


def test_equivalents_use_valence_and_osmoles_mean_osmolality() -> None:
    assert units.to_canonical(Analyte.SODIUM, 131, unit="mEq/L") == 131
    assert units.to_canonical(Analyte.POTASSIUM, 4.1, code="meq/L") == pytest.approx(4.1)
    for text in ("mOsm/kg H2O", "mosm/kg", "mOsm/kg", "mmol/kg"):
        assert units.to_canonical(Analyte.OSMOLALITY, 281, unit=text) == pytest.approx(281)
    assert units.to_canonical(Analyte.TSH, 2.5, unit="uIU/mL") == pytest.approx(2.5)
    assert units.to_canonical(Analyte.TSH, 2.5, code="m[IU]/L") == pytest.approx(2.5)


@pytest.mark.parametrize(
    ("analyte", "unit", "why"),
    [
        (Analyte.GLUCOSE, "mEq/L", "valence"),  # glucose carries no charge
        (Analyte.SODIUM, "mosm/L", "osmoles"),
        (Analyte.OSMOLALITY, "mOsm/L", "cannot be converted"),  # osmolarity is not osmolality
        (Analyte.TSH, "mg/L", "cannot be converted"),
        (Analyte.SODIUM, "parsecs per fortnight", "not recognised"),
        (Analyte.TOTAL_PROTEIN, "mmol/L", "cannot be converted"),  # no molar mass for protein
    ],
)
def test_unconvertible_units_say_why(analyte: Analyte, unit: str, why: str) -> None:
    with pytest.raises(units.UnitProblem, match=why):
        units.to_canonical(analyte, 1.0, unit=unit)


def test_missing_unit_is_a_problem() -> None:
    with pytest.raises(units.UnitProblem, match="no unit"):
        units.to_canonical(Analyte.SODIUM, 130)


def test_every_alias_resolves_to_parseable_ucum() -> None:
    for text, ucum in load("units")["aliases"].items():
        assert units.parse_ucum(ucum) is not None, (text, ucum)


def test_every_analyte_has_units_entry_and_canonical_unit_parses() -> None:
    for analyte in Analyte:
        info = units.analyte_units(analyte)
        assert info.low < info.high
        assert units.parse_ucum(CANONICAL_UNITS[analyte]) is not None
        assert units.factor(analyte, CANONICAL_UNITS[analyte]) == pytest.approx(1.0)


def test_plausible_range_bounds() -> None:
    assert units.plausible(Analyte.SODIUM, 90) and units.plausible(Analyte.SODIUM, 200)
    assert not units.plausible(Analyte.SODIUM, 89.9)
    assert not units.plausible(Analyte.SODIUM, math.nan)


_COMPATIBLE = [
    (Analyte.SODIUM, "meq/L"),
    (Analyte.SODIUM, "umol/mL"),
    (Analyte.GLUCOSE, "mmol/L"),
    (Analyte.GLUCOSE, "g/L"),
    (Analyte.UREA_NITROGEN, "mmol/L"),
    (Analyte.CREATININE, "umol/L"),
    (Analyte.CORTISOL, "nmol/L"),
    (Analyte.BODY_WEIGHT, "[lb_av]"),
    (Analyte.BODY_HEIGHT, "[in_i]"),
    (Analyte.OSMOLALITY, "mmol/kg"),
    (Analyte.TSH, "u[IU]/mL"),
    (Analyte.URINE_VOLUME_24H, "mL/(24.h)"),
]


@given(
    pair=st.sampled_from(_COMPATIBLE),
    value=st.floats(min_value=1e-3, max_value=1e5, allow_nan=False, allow_infinity=False),
)
def test_round_trip_convert_and_back(pair: tuple[Analyte, str], value: float) -> None:
    analyte, ucum = pair
    there = units.to_canonical(analyte, value, code=ucum)
    assert units.from_canonical(analyte, there, ucum) == pytest.approx(value, rel=1e-9)


@given(
    pair=st.sampled_from(_COMPATIBLE),
    a=st.floats(min_value=0, max_value=1e4, allow_nan=False),
    b=st.floats(min_value=0, max_value=1e4, allow_nan=False),
)
def test_conversion_is_monotonic_and_linear(pair: tuple[Analyte, str], a: float, b: float) -> None:
    analyte, ucum = pair
    ca, cb = (units.to_canonical(analyte, v, code=ucum) for v in (a, b))
    assert (ca <= cb) == (a <= b) or math.isclose(ca, cb)
    assert units.to_canonical(analyte, a + b, code=ucum) == pytest.approx(
        ca + cb, rel=1e-9, abs=1e-12
    )


def test_strength_ratio_concentration() -> None:
    # 154 mEq NaCl per L = 154 x 58.44 mg/L = 0.9 g/dL (0.9 %), common practice
    pct = units.concentration((154, "meq"), (1, "L"), "g/dL", 58.44, 1)
    assert pct == pytest.approx(0.9, abs=0.001)
    assert units.concentration((0.9, "g"), (100, "mL"), "g/dL") == pytest.approx(0.9)
    assert units.concentration((1, "g"), (0, "mL"), "g/dL") is None


def test_local_code_system_units_are_not_read_as_ucum() -> None:
    # "Pa" is UCUM's pascal; from a local code system it means nothing to us, so the unit
    # text decides (here: missing), rather than a wrong dimension being guessed.
    with pytest.raises(units.UnitProblem):
        units.resolve(None, "Pa", "http://larkspur.example.org/units")
    assert units.resolve("mg/dL", "Pa", "http://larkspur.example.org/units") == "mg/dL"
    assert units.resolve(None, "mg/dL", UCUM) == "mg/dL"
