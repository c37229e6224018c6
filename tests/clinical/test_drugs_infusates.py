"""Matching medications to drug classes and drafted fluids to their composition."""

from __future__ import annotations

import pytest

from cds_service.clinical.context import DraftFluid, DraftMedication, MedicationEntry
from cds_service.clinical.drugs import DrugRole, classify, is_active, match_medication
from cds_service.clinical.infusates import FluidTonicity, resolve
from cds_service.clinical.thresholds import Thresholds


def test_match_by_generic_name_code_and_display() -> None:
    # Liamis 2008 (from memory): thiazides, SSRIs and opioids are associated with hyponatremia.
    by_name = classify(["sertraline"], [])
    assert [(c.key, n) for c, n in by_name] == [("ssri", "sertraline")]
    by_code = classify([], ["5487"])  # RxNorm hydrochlorothiazide (from memory)
    assert by_code[0][0].key == "thiazides"
    by_display = classify([], [], "Tramadol hydrochloride 50 mg capsule")
    assert by_display[0][1] == "tramadol"
    assert classify(["paracetamol"], ["161"], "Paracetamol 1 g") == []


def test_display_match_needs_a_whole_word() -> None:
    # "morphine" must not match inside "hydromorphone"-like compounds of other words.
    hits = classify([], [], "Hydromorphone 2 mg")
    assert [n for _, n in hits] == ["hydromorphone"]


def test_combination_product_gives_each_class_once() -> None:
    hits = classify(["hydrochlorothiazide", "amiloride"], [], "co-amilozide")
    assert {c.key for c, _ in hits} == {"thiazides", "potassium_sparing_diuretics"}


def test_vaptan_role() -> None:
    draft = DraftMedication("MedicationRequest/d1", "Tolvaptan 15 mg tablet", ("tolvaptan",), ())
    (m,) = match_medication(draft)
    assert m.drug_class.role is DrugRole.VAPTAN and m.source_id == "MedicationRequest/d1"


@pytest.mark.parametrize(
    ("kind", "status", "active"),
    [
        ("MedicationRequest", "active", True),
        ("MedicationRequest", "completed", False),  # course finished
        ("MedicationAdministration", "completed", True),  # a dose was given
        ("MedicationStatement", "stopped", False),
        ("MedicationRequest", "on-hold", True),
    ],
)
def test_active_statuses(kind: str, status: str, active: bool) -> None:
    # FHIR R4 status value sets (MedicationRequest, MedicationStatement, MedicationAdministration).
    med = MedicationEntry(("sertraline",), (), "Sertraline", status, kind, f"{kind}/1")
    assert is_active(med) is active


@pytest.mark.parametrize(
    ("draft", "na_plus_k", "tonicity"),
    [
        # Adrogué & Madias 2000 table (from memory): Na + K per litre of each infusate.
        (DraftFluid("MedicationRequest/1", "x", named_solution="nacl_3"), 513, "hypertonic"),
        (DraftFluid("MedicationRequest/2", "x", nacl_percent=0.9), 154, "isotonic"),
        (DraftFluid("MedicationRequest/3", "x", nacl_percent=0.45), 77, "hypotonic"),
        (
            DraftFluid("MedicationRequest/4", "x", named_solution="lactated_ringers"),
            134,
            "isotonic",
        ),
        (DraftFluid("MedicationRequest/5", "x", dextrose_percent=5), 0, "hypotonic"),
        (
            DraftFluid(
                "MedicationRequest/6",
                "x",
                nacl_percent=0.45,
                dextrose_percent=5,
                added_potassium_mmol_per_l=20,
            ),
            97,
            "hypotonic",
        ),
        (
            DraftFluid("MedicationRequest/7", "Sodium chloride 3% (hypertonic saline) 250 mL"),
            513,
            "hypertonic",
        ),
        (DraftFluid("MedicationRequest/8", "D5W 1000 mL"), 0, "hypotonic"),
        (
            DraftFluid(
                "MedicationRequest/9", "x", named_solution="nacl_0_9", added_potassium_mmol_per_l=20
            ),
            174,
            "isotonic",
        ),
    ],
)
def test_fluid_resolution(
    th: Thresholds, draft: DraftFluid, na_plus_k: float, tonicity: str
) -> None:
    fluid = resolve(draft, th)
    assert fluid is not None
    assert fluid.sodium_plus_potassium == pytest.approx(na_plus_k, abs=0.5)
    assert fluid.tonicity is FluidTonicity(tonicity)


def test_d5w_osmolarity_matches_the_label(th: Thresholds) -> None:
    # 5 % dextrose (monohydrate 198.17 g/mol) is labelled 252 mOsm/L (common practice).
    fluid = resolve(DraftFluid("MedicationRequest/1", "x", dextrose_percent=5), th)
    assert fluid is not None and fluid.osmolarity == pytest.approx(252, abs=1)


def test_unknown_fluid_is_not_guessed(th: Thresholds) -> None:
    assert resolve(DraftFluid("MedicationRequest/1", "Albumin 5% 250 mL"), th) is None
    assert resolve(DraftFluid("MedicationRequest/2", "x", named_solution="unknown"), th) is None
