"""Draft orders written the way record systems write them: RxNorm clinical-drug names and
codes, WHO ATC codes, Medication resources (contained, in the draft bundle, in the record)
with ingredient strengths as UCUM Ratios, and orders nothing can identify.

Sources named beside each check:
- RxNorm names and codes: the HL7 FHIR R4 specification's Medication example med0317
  (ingredient RxNorm 313002 "Sodium Chloride 9 MG/ML Injectable Solution", 204520 "potassium
  chloride 2 MEQ/ML Injectable Solution", strength 0.9 g / 100 mL); an RXNCONSO table of SCD
  names (309778 "Glucose 50 MG/ML Injectable Solution", 309806 "Glucose 50 MG/ML / Sodium
  Chloride 0.0769 MEQ/ML Injectable Solution"); see cds_service/fhir/data/fluids.toml.
- WHO ATC codes: openFDA substance records (FDA GSRS, code system WHO-ATC): C03AA03
  hydrochlorothiazide, N06AB06 sertraline, B05XA01 potassium chloride.
- Strength arithmetic: 0.9 % = 0.9 g / 100 mL = 9 mg/mL (definition of w/v percent);
  154 mmol/L NaCl x 58.44 g/mol = 9.0 g/L (IUPAC atomic weights Na 22.99, Cl 35.45).
"""

from __future__ import annotations

from typing import Any

import pytest

from cds_service.clinical.context import Analyte, DisplayUnits
from cds_service.clinical.engine import evaluate_orders
from cds_service.clinical.findings import FindingCode
from cds_service.clinical.thresholds import load_thresholds
from cds_service.config import IngestSettings
from cds_service.fhir import build_context
from cds_service.fhir.fluids import parse_text, strengths
from tests.fhir.factory import NOW, PATIENT_ID, ingest, observation, patient

RXNORM = "http://www.nlm.nih.gov/research/umls/rxnorm"
ATC = "http://www.whocc.no/atc"
UCUM = "http://unitsofmeasure.org"
IV_ROUTE = {"coding": [{"system": "http://snomed.info/sct", "code": "47625008"}]}


def _draft(rid: str, concept: dict[str, Any] | None = None, **extra: Any) -> dict[str, Any]:
    mr: dict[str, Any] = {
        "resourceType": "MedicationRequest",
        "id": rid,
        "status": "draft",
        "intent": "proposal",
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
    }
    if concept is not None:
        mr["medicationCodeableConcept"] = concept
    mr.update(extra)
    return mr


def _coded(system: str, code: str, display: str | None = None) -> dict[str, Any]:
    coding = {"system": system, "code": code}
    if display is not None:
        coding["display"] = display
    return {"coding": [coding]}


def _litre(rate: float | None = None) -> list[dict[str, Any]]:
    dose: dict[str, Any] = {
        "doseQuantity": {"value": 1000, "unit": "mL", "system": UCUM, "code": "mL"}
    }
    if rate is not None:
        dose["rateQuantity"] = {"value": rate, "unit": "mL/h", "system": UCUM, "code": "mL/h"}
    return [{"route": IV_ROUTE, "doseAndRate": [dose]}]


def _codes(drafts: tuple[dict[str, Any], ...], sodium: float = 126) -> set[str]:
    record = [
        patient(),
        observation("na", "2951-2", sodium),
        observation("wt", "29463-7", 70, "kg"),
    ]
    ctx = ingest(*record, drafts=drafts).context
    return {f.code.value for f in evaluate_orders(ctx, load_thresholds())}


# ---- RxNorm clinical-drug names: the strength parser ---------------------------------------


@pytest.mark.parametrize(
    ("label", "nacl", "dextrose", "kcl"),
    [
        # RxNorm SCD names (fluids.toml sources); 9 mg/mL = 0.9 g/dL by definition
        ("sodium chloride 9 MG/ML Injectable Solution", 0.9, None, None),
        ("sodium chloride 4.5 MG/ML Injectable Solution", 0.45, None, None),
        ("sodium chloride 30 MG/ML Injectable Solution", 3.0, None, None),
        ("glucose 50 MG/ML Injectable Solution", 0.0, 5.0, None),
        # the older RxNorm name of 313002: 0.154 mEq/mL x 58.44 mg/mmol = 9.0 mg/mL
        ("Sodium Chloride 0.154 MEQ/ML Injectable Solution", 0.9, None, None),
        # D5 1/2NS as RxNorm 309806 names it: 0.0769 mEq/mL = 76.9 mmol/L = 0.449 %
        ("Glucose 50 MG/ML / Sodium Chloride 0.0769 MEQ/ML Injectable Solution", 0.4494, 5.0, None),
        # per-mL potassium in a premix: 0.02 mEq/mL = 20 mmol/L
        (
            "potassium chloride 0.02 MEQ/ML / sodium chloride 4.5 MG/ML Injectable Solution",
            0.45,
            None,
            20.0,
        ),
        # g/100 mL as on US labels (openFDA: "SODIUM CHLORIDE 900 mg/100mL")
        ("Sodium chloride 900 mg/100 mL injection", 0.9, None, None),
        ("dextrose 5 G/100ML / sodium chloride 0.9 G/100ML", 0.9, 5.0, None),
        # a quantified clinical drug: the leading volume is the bag, not a strength
        ("1000 ML sodium chloride 9 MG/ML Injection", 0.9, None, None),
    ],
)
def test_rxnorm_clinical_drug_names(label: str, nacl, dextrose, kcl) -> None:
    comp = parse_text(label)
    assert comp.nacl_percent == pytest.approx(nacl, abs=5e-4)
    assert comp.dextrose_percent == (pytest.approx(dextrose) if dextrose else None)
    assert comp.added_potassium_mmol_per_l == (pytest.approx(kcl) if kcl else None)
    assert comp.is_fluid


def test_quantified_drug_reads_its_volume_and_not_the_strength_denominator() -> None:
    assert parse_text("1000 ML sodium chloride 9 MG/ML Injection").volume_l == 1.0
    assert parse_text("sodium chloride 0.9 G/100ML").volume_l is None  # 100 mL is per-volume


def test_balanced_solutions_by_their_rxnorm_ingredient_lists() -> None:
    # RxNorm 847630 (fluids.toml): lactated Ringer's by its four ingredients; the KCl of the
    # solution itself is not an addition to it
    lr = parse_text(
        "calcium chloride 0.2 MG/ML / potassium chloride 0.3 MG/ML / sodium chloride 6 MG/ML "
        "/ sodium lactate 3.1 MG/ML Injectable Solution"
    )
    assert (lr.named_solution, lr.nacl_percent, lr.added_potassium_mmol_per_l) == (
        "lactated_ringers",
        None,
        None,
    )
    # openFDA NDC 65219-387 "Multiple Electrolytes": sodium gluconate and acetate
    pl = parse_text(
        "magnesium chloride 0.3 MG/ML / potassium chloride 0.37 MG/ML / sodium acetate 3.68 "
        "MG/ML / sodium chloride 5.26 MG/ML / sodium gluconate 5.02 MG/ML Injectable Solution"
    )
    assert pl.named_solution == "plasmalyte_148"


def test_strength_parser_converts_equivalents_and_mass_alike() -> None:
    # 154 mmol/L x 58.44 g/mol = 9.0 g/L = 0.9 g/dL (IUPAC atomic weights)
    assert strengths("sodium chloride 0.154 meq/ml")["nacl"] == pytest.approx(0.9, abs=1e-3)
    assert strengths("sodium chloride 9 mg/ml")["nacl"] == pytest.approx(0.9)


# ---- codes without names; ATC; Medication resources --------------------------------------


def test_rxnorm_code_alone_gives_the_composition() -> None:
    # 309778 = glucose 50 MG/ML Injectable Solution (D5W): a hypotonic fluid at Na 126
    drafts = (_draft("d1", _coded(RXNORM, "309778"), dosageInstruction=_litre(80)),)
    (fluid,) = ingest(drafts=drafts).context.draft_fluids
    assert (fluid.nacl_percent, fluid.dextrose_percent, fluid.volume_l) == (0.0, 5.0, 1.0)
    assert "hypotonic-fluid-order" in _codes(drafts)


@pytest.mark.parametrize(
    ("label", "code"),
    [
        ("sodium chloride 4.5 MG/ML Injectable Solution", "hypotonic-fluid-order"),
        ("sodium chloride 9 MG/ML Injectable Solution", "isotonic-fluid-order"),
        ("sodium chloride 30 MG/ML Injectable Solution", "hypertonic-saline-order"),
        ("glucose 50 MG/ML Injectable Solution", "hypotonic-fluid-order"),
        (
            "Glucose 50 MG/ML / Sodium Chloride 0.0769 MEQ/ML Injectable Solution",
            "hypotonic-fluid-order",
        ),
    ],
)
def test_rxnorm_named_fluids_produce_their_cards(label: str, code: str) -> None:
    # Na 126 (< 135, Spasovski 2014 section 1.1 definition of hyponatremia): every fluid is judged
    drafts = (
        _draft(
            "f",
            {"coding": [{"system": RXNORM, "code": "0", "display": label}]},
            dosageInstruction=_litre(100),
        ),
    )
    assert code in _codes(drafts)


def test_atc_coded_drugs_are_matched_to_their_class() -> None:
    # C03AA03 hydrochlorothiazide, N06AB06 sertraline (openFDA GSRS WHO-ATC records)
    drafts = (
        _draft("h", _coded(ATC, "C03AA03", "Esidrex 25 mg Tabletten")),
        _draft("s", _coded("urn:oid:2.16.840.1.113883.6.73", "N06AB06")),
    )
    ctx = ingest(drafts=drafts).context
    assert [d.names[:1] for d in ctx.draft_medications] == [
        ("hydrochlorothiazide",),
        ("sertraline",),
    ]
    assert "drug-order-risk" in _codes(drafts)


def test_potassium_chloride_as_a_drug_and_as_an_additive() -> None:
    # B05XA01 potassium chloride (openFDA GSRS WHO-ATC); RxNorm 204520 (FHIR R4 med0317)
    atc = _draft("k1", _coded(ATC, "B05XA01"))
    rx = _draft("k2", _coded(RXNORM, "204520", "potassium chloride 2 MEQ/ML Injectable Solution"))
    ctx = ingest(drafts=(atc, rx)).context
    assert all("potassium chloride" in d.names for d in ctx.draft_medications)
    assert len(ctx.draft_medications) == 2 and not ctx.draft_fluids
    premix = _draft(
        "k3",
        _coded(
            RXNORM,
            "0",
            "potassium chloride 0.02 MEQ/ML / sodium chloride 9 MG/ML Injectable Solution",
        ),
    )
    (fluid,) = ingest(drafts=(premix,)).context.draft_fluids
    assert (fluid.nacl_percent, fluid.added_potassium_mmol_per_l) == (0.9, 20.0)


def _medication(mid: str, *ingredients: tuple[str, str, float, str, float, str]) -> dict[str, Any]:
    return {
        "resourceType": "Medication",
        "id": mid,
        "ingredient": [
            {
                "itemCodeableConcept": _coded(RXNORM, code, name),
                "strength": {
                    "numerator": {"value": nv, "system": UCUM, "code": nu},
                    "denominator": {"value": dv, "system": UCUM, "code": du},
                },
            }
            for code, name, nv, nu, dv, du in ingredients
        ],
    }


# FHIR R4 Medication example med0317: KCl 2 mEq/mL in NaCl 0.9 g/100 mL (9863 and 8591 are
# the RxNorm ingredient codes, from memory; the strengths decide)
NACL_09 = ("9863", "sodium chloride", 0.9, "g", 100, "mL")
KCL_20 = ("8591", "potassium chloride", 20, "meq", 1000, "mL")


@pytest.mark.parametrize("where", ["contained", "draft bundle", "record"])
def test_medication_reference_with_ucum_ratio_strengths(where: str) -> None:
    med = _medication("m1", NACL_09, KCL_20)
    mr = _draft("f1", None, dosageInstruction=_litre(125))
    record: list[dict[str, Any]] = []
    drafts: tuple[dict[str, Any], ...] = (mr,)
    if where == "contained":
        mr["contained"] = [med]
        mr["medicationReference"] = {"reference": "#m1"}
    elif where == "draft bundle":
        mr["medicationReference"] = {"reference": "Medication/m1"}
        drafts = (med, mr)
    else:
        mr["medicationReference"] = {"reference": "Medication/m1"}
        record = [med]
    (fluid,) = ingest(*record, drafts=drafts).context.draft_fluids
    assert (fluid.nacl_percent, fluid.added_potassium_mmol_per_l, fluid.rate_ml_per_h) == (
        0.9,
        20.0,
        125.0,
    )


# ---- unidentified drafts -------------------------------------------------------------------


@pytest.mark.parametrize(
    "draft",
    [
        _draft("u1", {"text": "Maintenance IV fluid"}, dosageInstruction=_litre(100)),
        _draft("u2", _coded(ATC, "B05BB01", "Elektrolyt-Infusionslösung")),
        _draft("u3", {"text": "Sterofundin 1000 mL"}, dosageInstruction=_litre()),
    ],
    ids=["free text", "ATC electrolyte solution", "unknown balanced solution"],
)
def test_unidentifiable_fluid_gets_its_card_at_low_sodium(draft: dict[str, Any]) -> None:
    (unknown,) = ingest(drafts=(draft,)).context.draft_unidentified
    assert unknown.kind == "fluid" and unknown.display
    assert "unidentified-order" in _codes((draft,), sodium=126)
    # the published boundary: hyponatremia is Na < 135 (Spasovski 2014, section 1.1)
    assert "unidentified-order" in _codes((draft,), sodium=134)
    assert "unidentified-order" not in _codes((draft,), sodium=135)


def test_drug_in_unknown_code_system_gets_its_card() -> None:
    draft = _draft("x1", _coded("http://larkspur.example.org/formulary", "77-1042", "Zorvex 5 mg"))
    (unknown,) = ingest(drafts=(draft,)).context.draft_unidentified
    assert unknown.kind == "drug"
    assert unknown.codes == ("http://larkspur.example.org/formulary|77-1042",)
    ctx = ingest(patient(), observation("na", "2951-2", 126), drafts=(draft,)).context
    (finding,) = [
        f
        for f in evaluate_orders(ctx, load_thresholds())
        if f.code is FindingCode.UNIDENTIFIED_ORDER
    ]
    assert "Zorvex 5 mg" in finding.summary
    assert any("77-1042" in line for line in finding.details)


@pytest.mark.parametrize(
    "draft",
    [
        # a known generic name in an unknown system is identified by its name
        _draft("y1", _coded("http://larkspur.example.org/formulary", "9", "sertraline 50 mg")),
        # an oral tablet is no IV fluid, and RxNorm is a system Tonicity reads
        _draft("y2", _coded(RXNORM, "0", "atorvastatin 40 MG Oral Tablet")),
        _draft("y3", {"text": "glucose 4 g chewable tablet"}),
    ],
)
def test_identified_orders_are_not_called_unidentified(draft: dict[str, Any]) -> None:
    assert ingest(drafts=(draft,)).context.draft_unidentified == ()


def test_display_units_reach_the_context_and_values_stay_canonical() -> None:
    # the institution's display.units sets ctx.display_units; the lab values do not change
    record = [patient(), observation("cr", "2160-0", 1.2, "mg/dL")]
    ctx = build_context(
        record, now=NOW, settings=IngestSettings(), patient_id=PATIENT_ID, display_units="si"
    ).context
    assert ctx.display_units is DisplayUnits.SI
    assert ctx.current[Analyte.CREATININE].value == 1.2


@pytest.mark.parametrize(
    "draft",
    [
        _draft("k1", _coded(ATC, "B05XA01")),  # openFDA GSRS WHO-ATC: potassium chloride
        _draft(
            "k2",
            _coded(
                RXNORM,
                "0",
                "potassium chloride 0.02 MEQ/ML / sodium chloride 9 MG/ML Injectable Solution",
            ),
            dosageInstruction=_litre(100),
        ),
    ],
    ids=["ATC concentrate", "RxNorm premix"],
)
def test_coded_potassium_reaches_the_potassium_rule(draft: dict[str, Any]) -> None:
    # potassium counts like sodium in the Adrogue-Madias numerator (Adrogue & Madias 2000)
    assert "potassium-order" in _codes((draft,))
