"""Observation shapes record systems send beyond one plain valueQuantity.

Sources named beside each check:
- FHIR R4 Observation (hl7.org/fhir/R4/observation.html): value[x] incl. valueString,
  Quantity.comparator (< <= >= >), dataAbsentReason ("provides a reason why the expected
  value in the element Observation.value[x] is missing"), interpretation, method, specimen,
  component; the v3-ObservationInterpretation codes L, LL, H, HH.
- LOINC codes and long names: see cds_service/fhir/data/loinc.toml (Project Ronin LOINC 2.70
  value sets Sodium, Potassium, BUN; HL7 examples for 3024-7 and 14682-9).
- Direct against indirect ISE: Spasovski 2014 (section 2.2, pseudohyponatraemia: indirect ISE
  after dilution reads low when lipids or proteins are high; direct ISE does not); from memory.
"""

from __future__ import annotations

import pytest

from cds_service.clinical.context import Analyte
from cds_service.clinical.engine import evaluate_workup
from cds_service.clinical.findings import FindingCode
from cds_service.clinical.thresholds import load_thresholds
from cds_service.fhir import loinc
from tests.fhir.factory import LOINC, ingest, line_for, observation, patient, quantity

INTERPRETATION = "http://terminology.hl7.org/CodeSystem/v3-ObservationInterpretation"


def _flag(code: str) -> list[dict]:
    return [{"coding": [{"system": INTERPRETATION, "code": code}]}]


@pytest.mark.parametrize(
    ("code", "analyte", "name"),
    [
        # Project Ronin LOINC 2.70 ValueSet Sodium
        ("39792-7", Analyte.SODIUM, "Sodium [Moles/volume] in Capillary blood"),
        ("41657-8", Analyte.SODIUM, "Sodium [Moles/volume] in Mixed venous blood"),
        # ValueSet Potassium
        ("39789-3", Analyte.POTASSIUM, "Potassium [Moles/volume] in Venous blood"),
        ("6298-4", Analyte.POTASSIUM, "Potassium [Moles/volume] in Blood"),
        # ValueSet BUN
        ("14937-7", Analyte.UREA_NITROGEN, "Urea nitrogen [Moles/volume] in Serum or Plasma"),
        # HL7 Lithuania / HL7 Europe laboratory examples
        ("14682-9", Analyte.CREATININE, "Creatinine [Moles/volume] in Serum or Plasma"),
        # HL7 FHIR ServiceRequest example narrative
        ("3024-7", Analyte.FREE_T4, "Thyroxine (T4) free [Mass/volume] in Serum or Plasma"),
        ("5643-2", Analyte.ETHANOL, "Ethanol [Mass/volume] in Serum or Plasma"),
    ],
)
def test_new_and_corrected_loinc_entries(code: str, analyte: Analyte, name: str) -> None:
    entry = loinc.lookup(code)
    assert entry is not None and (entry.analyte, entry.name) == (analyte, name)
    assert "from memory" not in entry.source


def test_24_hour_urine_sodium_is_not_read_as_a_concentration() -> None:
    # 2956-1 is Sodium [Moles/time] in 24 hour Urine (mmol/(24.h)): a rate, not mmol/L
    assert loinc.lookup("2956-1") is None


def test_urea_nitrogen_in_moles_converts_to_mass() -> None:
    # 5.0 mmol/L x 28.02 mg/mmol (two nitrogens, IUPAC 14.007) = 14.0 mg/dL
    res = ingest(observation("bun", "14937-7", 5.0, "mmol/L"))
    assert res.context.current[Analyte.UREA_NITROGEN].value == pytest.approx(14.0, abs=0.05)


def test_capillary_sodium_is_read_as_direct_ise() -> None:
    na = ingest(observation("na", "39792-7", 131)).context.current[Analyte.SODIUM]
    assert (na.value, na.direct_ise, na.loinc) == (131, True, "39792-7")


@pytest.mark.parametrize(
    ("extra", "direct"),
    [
        ({"method": {"text": "Direct ISE"}}, True),
        (
            {
                "method": {
                    "coding": [{"system": "urn:lvh:method", "code": "D", "display": "ISE, direct"}],
                    "text": "direct ion-selective electrode",
                }
            },
            True,
        ),
        ({"specimen": {"display": "Whole blood (heparinised syringe)"}}, True),
        ({"method": {"text": "Indirect ISE"}, "specimen": {"display": "whole blood"}}, False),
        ({"specimen": {"display": "Serum"}}, False),
        ({}, False),  # 2951-2 is serum or plasma: indirect unless told otherwise
    ],
)
def test_method_and_specimen_decide_direct_ise(extra: dict, direct: bool) -> None:
    na = ingest(observation("na", "2951-2", 129, **extra)).context.current[Analyte.SODIUM]
    assert na.direct_ise is direct


def test_loinc_coding_is_chosen_among_several() -> None:
    obs = observation("na", "2951-2", 127)
    obs["code"]["coding"] = [
        {"system": "urn:lvh:lab", "code": "NA", "display": "Sodium"},
        {"system": "http://snomed.info/sct", "code": "312469006"},
        {"system": LOINC, "code": "2951-2"},
    ]
    assert ingest(obs).context.current[Analyte.SODIUM].loinc == "2951-2"


@pytest.mark.parametrize(
    ("code", "value", "analyte", "comparator", "number"),
    [
        ("2695-5", "<100 mOsm/kg", Analyte.URINE_OSMOLALITY, "<", 100.0),
        ("2695-5", ">1000 mosm/kg", Analyte.URINE_OSMOLALITY, ">", 1000.0),
        ("2955-3", "<= 20 mmol/L", Analyte.URINE_SODIUM, "<=", 20.0),
    ],
)
def test_value_string_with_comparator(
    code: str, value: str, analyte: Analyte, comparator: str, number: float
) -> None:
    r = ingest(observation("u", code, None, valueString=value)).context.current[analyte]
    assert (r.comparator, r.value) == (comparator, number)


def test_quantity_comparator_greater_than() -> None:
    obs = observation(
        "osm",
        "2695-5",
        None,
        valueQuantity=quantity(1000, "mosm/kg", "mosm/kg") | {"comparator": ">"},
    )
    r = ingest(obs).context.current[Analyte.URINE_OSMOLALITY]
    assert (r.comparator, r.value) == (">", 1000)


def test_component_values_are_read() -> None:
    panel = observation(
        "lytes",
        "24326-1",
        None,
        component=[
            {
                "code": {"coding": [{"system": LOINC, "code": "2951-2"}]},
                "valueQuantity": quantity(128, "mmol/L", "mmol/L"),
            },
            {
                "code": {"coding": [{"system": LOINC, "code": "2823-3"}]},
                "valueQuantity": quantity(3.1, "mmol/L", "mmol/L"),
            },
        ],
    )
    cur = ingest(panel).context.current
    assert (cur[Analyte.SODIUM].value, cur[Analyte.POTASSIUM].value) == (128, 3.1)


def test_flagged_result_without_a_number_reaches_the_card() -> None:
    # dataAbsentReason with interpretation LL: the result exists, it is critically low, and
    # there is no number to use; it must be shown, never dropped
    obs = observation(
        "na",
        "2951-2",
        None,
        dataAbsentReason={"text": "below measuring range"},
        interpretation=_flag("LL"),
    )
    res = ingest(patient(), obs)
    (rejected,) = res.context.rejected
    assert rejected.analyte is Analyte.SODIUM and "critically low (LL)" in rejected.reason
    findings = evaluate_workup(res.context, load_thresholds())
    (card,) = [f for f in findings if f.code is FindingCode.IMPLAUSIBLE]
    assert "LL" in card.summary


def test_absent_value_without_a_flag_is_ignored_with_its_reason() -> None:
    obs = observation("na", "2951-2", None, dataAbsentReason={"text": "not performed"})
    res = ingest(obs)
    assert res.context.rejected == ()
    (line,) = line_for(res, "Observation/na")
    assert not line.used and "not performed" in line.reason
