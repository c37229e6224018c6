"""Draft IV fluids: composition from text, ingredient strengths and dosage; other drafts."""

from __future__ import annotations

import pytest

from cds_service.clinical.context import DraftFluid
from cds_service.fhir.fluids import parse_text
from tests.fhir.factory import PATIENT_ID, ingest, med_request


@pytest.mark.parametrize(
    ("label", "nacl", "dextrose", "kcl", "named"),
    [
        ("Sodium chloride 3% 500 mL", 3.0, None, None, None),
        ("D5 1/2NS with 20 mEq/L KCl", 0.45, 5.0, 20.0, None),
        ("0.45% NaCl", 0.45, None, None, None),
        ("NS", 0.9, None, None, None),
        ("half normal saline", 0.45, None, None, None),
        ("D5W", 0.0, 5.0, None, None),
        ("Dextrose 5% in water", 0.0, 5.0, None, None),
        ("D5NS", 0.9, 5.0, None, None),
        ("0.9 % sodium chloride injection 1000 mL", 0.9, None, None, None),
        ("Lactated Ringer's 1000 mL", None, None, None, "lactated_ringers"),
        ("Plasma-Lyte 148", None, None, None, "plasmalyte_148"),
        ("1/4 NS", 0.225, None, None, None),
        ("Hypertonic saline 150 mL", 3.0, None, None, None),
        ("Sodium chloride 23.4% injection", 23.4, None, None, None),
        ("D5LR 1000 mL", None, 5.0, None, "lactated_ringers"),
    ],
)
def test_composition_from_text(label: str, nacl, dextrose, kcl, named) -> None:
    comp = parse_text(label)
    assert (
        comp.nacl_percent,
        comp.dextrose_percent,
        comp.added_potassium_mmol_per_l,
        comp.named_solution,
    ) == (nacl, dextrose, kcl, named)
    assert comp.is_fluid


@pytest.mark.parametrize(
    "label",
    [
        "Furosemide 40 MG Injection",
        "Vitamin D 50000 unit capsule",
        "Potassium chloride 20 mEq tablet",
    ],
)
def test_non_fluids(label: str) -> None:
    assert not parse_text(label).is_fluid


def _draft(rid: str, text: str, **extra) -> dict:
    return med_request(rid, text, status="draft", **extra)


def test_volume_and_rate_from_dosage_instruction() -> None:
    mr = _draft("f1", "Sodium chloride 3% injection")
    mr["dosageInstruction"] = [
        {
            "doseAndRate": [
                {
                    "doseQuantity": {
                        "value": 250,
                        "unit": "mL",
                        "system": "http://unitsofmeasure.org",
                        "code": "mL",
                    },
                    "rateRatio": {
                        "numerator": {"value": 50, "unit": "mL"},
                        "denominator": {"value": 1, "unit": "h"},
                    },
                }
            ]
        }
    ]
    (fluid,) = ingest(drafts=(mr,)).context.draft_fluids
    assert fluid == DraftFluid(
        "MedicationRequest/f1",
        "Sodium chloride 3% injection",
        nacl_percent=3.0,
        volume_l=0.25,
        rate_ml_per_h=50.0,
    )


def test_rate_quantity_in_litres_per_day() -> None:
    mr = _draft("f2", "0.9% sodium chloride")
    mr["dosageInstruction"] = [{"doseAndRate": [{"rateQuantity": {"value": 2.4, "unit": "L/d"}}]}]
    (fluid,) = ingest(drafts=(mr,)).context.draft_fluids
    assert fluid.rate_ml_per_h == pytest.approx(100.0)


def test_composition_from_medication_ingredient_strengths() -> None:
    # 154 mEq/L NaCl (= 0.9 %, common practice) with 20 mEq KCl per 1000 mL
    med = {
        "resourceType": "Medication",
        "id": "bag",
        "code": {"text": "Custom maintenance bag"},
        "ingredient": [
            {
                "itemCodeableConcept": {"text": "Sodium Chloride"},
                "strength": {
                    "numerator": {"value": 154, "unit": "mEq"},
                    "denominator": {"value": 1, "unit": "L"},
                },
            },
            {
                "itemCodeableConcept": {"text": "Potassium Chloride"},
                "strength": {
                    "numerator": {"value": 20, "unit": "meq"},
                    "denominator": {"value": 1000, "unit": "mL"},
                },
            },
            {
                "itemCodeableConcept": {"text": "Dextrose"},
                "strength": {
                    "numerator": {"value": 5, "unit": "g"},
                    "denominator": {"value": 100, "unit": "mL"},
                },
            },
        ],
    }
    mr = _draft("f3", "x")
    del mr["medicationCodeableConcept"]
    mr["contained"] = [med]
    mr["medicationReference"] = {"reference": "#bag"}
    (fluid,) = ingest(drafts=(mr,)).context.draft_fluids
    assert fluid.nacl_percent == pytest.approx(0.9, abs=0.001)
    assert fluid.added_potassium_mmol_per_l == pytest.approx(20)
    assert fluid.dextrose_percent == pytest.approx(5)


def test_drug_drafts_and_selection() -> None:
    drafts = (
        _draft("d1", "Tolvaptan 15 MG Oral Tablet"),
        _draft("d2", "NS 1000 mL"),
        {
            "resourceType": "ServiceRequest",
            "id": "s1",
            "status": "draft",
            "intent": "proposal",
            "subject": {"reference": f"Patient/{PATIENT_ID}"},
        },
    )
    ctx = ingest(
        drafts=(
            {
                "resourceType": "Bundle",
                "type": "collection",
                "entry": [{"resource": d} for d in drafts],
            },
        ),
        selections=("MedicationRequest/d1",),
    ).context
    (med,) = ctx.draft_medications
    (fluid,) = ctx.draft_fluids
    assert med.names == ("tolvaptan",) and med.selected
    assert fluid.nacl_percent == 0.9 and fluid.volume_l == 1.0 and not fluid.selected


def test_all_drafts_selected_when_no_selections() -> None:
    ctx = ingest(drafts=(_draft("d1", "NS"), _draft("d2", "Sertraline 50 MG Oral Tablet"))).context
    assert all(d.selected for d in (*ctx.draft_fluids, *ctx.draft_medications))
