"""One coherent plan per response; order cards that read the re-lowering context, potassium,
hypovolemia, balanced solutions, symptoms and acuity, low solute intake, unchecked patients.

Sources named beside each check: Spasovski G et al., Eur J Endocrinol 2014;170:G1-G47
(sections 5.2, 8.1-8.5); Verbalis JG et al., Am J Med 2013;126:S1-S42; Adrogué HJ, Madias NE,
Hyponatremia, N Engl J Med 2000;342:1581-1589 (formula with infusate Na + K; worked
example: elderly woman, 50 kg, sodium 108, 3% saline +17.2 mmol/L per litre).
"""

from __future__ import annotations

import dataclasses

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import (
    Analyte as A,
)
from cds_service.clinical.context import (
    ConditionCategory as CC,
)
from cds_service.clinical.context import (
    DraftFluid,
    DraftMedication,
    Sex,
)
from cds_service.clinical.engine import _RAISING, evaluate_orders, evaluate_workup
from cds_service.clinical.findings import Finding, Urgency
from cds_service.clinical.findings import FindingCode as C
from cds_service.clinical.findings import ValueName as V
from cds_service.clinical.thresholds import load_thresholds

from .conftest import make_ctx, sodium_series

TH = load_thresholds()
D5W = DraftFluid("MedicationRequest/d5w", "D5W 1000 mL", named_solution="d5w")
HTS = DraftFluid("MedicationRequest/hts", "3% NaCl", named_solution="nacl_3")
NS = DraftFluid("MedicationRequest/ns", "0.9% NaCl", named_solution="nacl_0_9")
KCL = DraftMedication("MedicationRequest/kcl", "Potassium chloride 20 mmol IV", (), ())
OVER = sodium_series([(20, 112), (1, 124)])  # +12 in 19 h: above 10 (both guidelines)


def _by(found: list[Finding]) -> dict[C, Finding]:
    return {f.code: f for f in found}


def _values(f: Finding) -> dict[V, object]:
    return {v.name: v.value for v in f.values}


def _text(f: Finding) -> str:
    return " ".join([f.summary, *f.details, *f.next_steps, *f.cautions])


# ---- one plan (Spasovski 2014 section 8.5) -------------------------------------------------


def test_d5w_after_overcorrection_is_the_advised_relowering() -> None:
    # Spasovski 2014 section 8.5: electrolyte-free water (e.g. glucose solutions) 10 mL/kg over
    # 1 h and desmopressin 2 ug IV (not more often than every 8 h); 70 kg -> 700 mL.
    ctx = make_ctx(age=60, sex=Sex.MALE, weight=70, fluids=[D5W], series={A.SODIUM: OVER})
    found = evaluate_orders(ctx, TH)
    assert found[0].code is C.CORRECTION_RATE  # the correction card leads
    card = _by(found)[C.HYPOTONIC_FLUID_ORDER]
    assert card.urgency is Urgency.INFO and card.remove_draft is None
    assert "re-lowering" in card.summary
    v = _values(card)
    # Adrogué & Madias 2000: (0 - 124) / (0.6 x 70 + 1) = -2.9 mmol/L per litre.
    assert v[V.DELTA_SODIUM_PER_LITER] == -2.9
    assert v[V.FREE_WATER_RELOWERING] == 700 and v[V.DESMOPRESSIN_DOSE] == 2
    assert "Remove the draft" not in _text(card)


def test_d5w_just_within_the_limit_is_still_a_hypotonic_warning() -> None:
    # Boundary: exactly 10 mmol/L in 24 h is within the limit, so D5W lowers a low sodium.
    ctx = make_ctx(weight=70, fluids=[D5W], series={A.SODIUM: sodium_series([(20, 112), (1, 122)])})
    card = _by(evaluate_orders(ctx, TH))[C.HYPOTONIC_FLUID_ORDER]
    assert card.urgency is Urgency.WARNING and card.remove_draft == D5W.resource_id


def test_no_card_urges_raising_sodium_beside_overcorrection() -> None:
    # Profound sodium (Spasovski 2014: < 125) that has risen 12 mmol/L in 19 h: the tonicity
    # card must not say "urgent treatment" beside the correction card's re-lowering.
    series = sodium_series([(20, 108), (1, 120)])
    for found in (
        evaluate_workup(make_ctx(series={A.SODIUM: series}), TH),
        evaluate_orders(
            make_ctx(series={A.SODIUM: series}, fluids=[HTS, D5W, NS], drafts=[KCL]), TH
        ),
    ):
        assert found[0].code is C.CORRECTION_RATE
        for f in found[1:]:
            assert not _RAISING.search(" ".join([*f.next_steps, *f.cautions])), f.code
    orders = _by(evaluate_orders(make_ctx(series={A.SODIUM: series}, fluids=[HTS]), TH))
    assert "against re-lowering" in orders[C.HYPERTONIC_SALINE_ORDER].summary


# ---- isotonic saline in hypovolemia --------------------------------------------------------


@pytest.mark.parametrize(("una", "warned"), [(30, True), (31, False)])
def test_isotonic_saline_in_hypovolemia_warns_of_water_diuresis(una: float, warned: bool) -> None:
    # Spasovski 2014 (urine sodium <= 30 mmol/L suggests low effective arterial volume);
    # restoring volume switches off vasopressin and the water diuresis can overcorrect.
    ctx = make_ctx({A.SODIUM: 122, A.URINE_SODIUM: una}, fluids=[NS])
    card = _by(evaluate_orders(ctx, TH))[C.ISOTONIC_FLUID_ORDER]
    assert any("switch off vasopressin" in c for c in card.cautions) is warned


def test_vomiting_coded_counts_as_a_hypovolemia_clue() -> None:
    ctx = make_ctx({A.SODIUM: 122}, fluids=[NS], conditions=[CC.VOMITING_DIARRHEA])
    card = _by(evaluate_orders(ctx, TH))[C.ISOTONIC_FLUID_ORDER]
    assert any("vomiting or diarrhoea" in c for c in card.cautions)


def test_lactated_ringers_is_named_a_balanced_crystalloid() -> None:
    lr = DraftFluid("MedicationRequest/lr", "LR 1 L", named_solution="lactated_ringers")
    card = _by(evaluate_orders(make_ctx({A.SODIUM: 126}, fluids=[lr]), TH))[C.ISOTONIC_FLUID_ORDER]
    assert "lactated Ringer's" in card.summary and "balanced crystalloid" in card.summary
    assert "saline" not in card.summary.lower()


# ---- potassium (DESIGN.md potassium-order; Adrogué & Madias 2000 numerator Na + K) --------


@pytest.mark.parametrize(("na", "expected"), [(134, True), (135, False)])
def test_potassium_order_boundary_at_135(na: float, expected: bool) -> None:
    found = _by(evaluate_orders(make_ctx({A.SODIUM: na}, drafts=[KCL]), TH))
    assert (C.POTASSIUM_ORDER in found) is expected
    if expected:
        assert "counts toward the correction limit" in found[C.POTASSIUM_ORDER].summary


def test_potassium_in_a_fluid_counts_in_the_numerator() -> None:
    # Adrogué & Madias 2000: change = (Na + K infusate - Na serum) / (TBW + 1); 0.9% saline
    # with 20 mmol/L KCl in a 60-kg man aged 30 at sodium 112: (154 + 20 - 112) / 37 = +1.7,
    # of which the potassium gives 20 / 37 = +0.5 per litre.
    fluid = DraftFluid(
        "MedicationRequest/nsk", "NS + 20 KCl", nacl_percent=0.9, added_potassium_mmol_per_l=20
    )
    ctx = make_ctx({A.SODIUM: 112}, age=30, sex=Sex.MALE, weight=60, fluids=[fluid])
    found = _by(evaluate_orders(ctx, TH))
    iso = found[C.ISOTONIC_FLUID_ORDER]
    assert _values(iso)[V.DELTA_SODIUM_PER_LITER] == 1.7
    assert any("+0.5 mmol/L per litre" in d for d in iso.details)
    assert C.POTASSIUM_ORDER in found


def test_potassium_premix_by_name() -> None:
    premix = DraftFluid("MedicationRequest/p", "x", named_solution="nacl_0_9_kcl_20")
    found = _by(evaluate_orders(make_ctx({A.SODIUM: 128}, fluids=[premix]), TH))
    assert C.POTASSIUM_ORDER in found
    plain = _by(evaluate_orders(make_ctx({A.SODIUM: 128}, fluids=[NS]), TH))
    assert C.POTASSIUM_ORDER not in plain


# ---- hypertonic saline tied to symptoms and acuity (Spasovski 2014 section 8) -------------


def _hts(**kw: object) -> Finding:
    ctx = make_ctx(fluids=[HTS], **kw)  # type: ignore[arg-type]
    return _by(evaluate_orders(ctx, TH))[C.HYPERTONIC_SALINE_ORDER]


def test_severe_symptoms_get_the_repeated_bolus_regimen() -> None:
    # Spasovski 2014 section 8.1.1: 150 mL 3% over 20 min, check after 20 min, repeat twice
    # (three infusions at most) or until +5 mmol/L.
    card = _hts(labs={A.SODIUM: 118}, conditions=[CC.SYMPTOM_SEIZURE])
    text = " ".join(card.details)
    for phrase in (
        "150 mL of 3% saline over 20 min",
        "after 20 min",
        "at most 3 infusions",
        "risen 5 mmol/L",
        "until sodium reaches 130",
    ):
        assert phrase in text
    assert "another cause" not in text


@pytest.mark.parametrize(("na", "other_cause"), [(129, False), (130, True)])
def test_severe_symptoms_with_mildly_low_sodium_seek_another_cause(
    na: float, other_cause: bool
) -> None:
    # Spasovski 2014 (mild hyponatraemia 130-135): severe symptoms at a mildly low sodium
    # point to another cause.
    card = _hts(labs={A.SODIUM: na}, conditions=[CC.SYMPTOM_COMA])
    assert any("another cause" in d for d in card.details) is other_cause


def test_moderately_severe_symptoms_get_a_single_infusion() -> None:
    # Spasovski 2014 section 8.2: a single 150 mL infusion, aim +5 mmol/L per 24 h.
    card = _hts(labs={A.SODIUM: 122}, conditions=[CC.SYMPTOM_CONFUSION])
    text = " ".join(card.details)
    assert "single 150 mL" in text and "5 mmol/L per 24 h" in text
    assert "at most 3 infusions" not in text


@pytest.mark.parametrize(("fall", "single"), [(11, True), (10, False)])
def test_acute_fall_over_10_gets_a_single_infusion(fall: float, single: bool) -> None:
    # Spasovski 2014 section 8.3: acute (< 48 h) fall of more than 10 mmol/L.
    series = sodium_series([(30, 138), (2, 138 - fall)])
    card = _hts(series={A.SODIUM: series})
    text = " ".join(card.details)
    assert ("Acute fall of" in text) is single
    assert ("does not advise hypertonic saline" in text) is not single


def test_chronic_without_symptoms_is_not_advised() -> None:
    card = _hts(labs={A.SODIUM: 120})
    text = " ".join(card.details)
    assert "does not advise" in text and "assessed at the bedside" in text


# ---- low solute intake (Berl 2008: urine volume = solute load / minimal urine osm) --------


def test_low_solute_intake_arithmetic_tied_to_alcohol_use_disorder() -> None:
    card = _hts(labs={A.SODIUM: 120}, conditions=[CC.ALCOHOL_USE_DISORDER])
    assert any("250 / 50 = 5 L" in d for d in card.details)
    plain = _hts(labs={A.SODIUM: 120})
    assert not any("250 / 50" in d for d in plain.details)


# ---- patient not checked -------------------------------------------------------------------


def test_unchecked_patient_gets_no_sex_or_age_dependent_numbers() -> None:
    ctx = make_ctx({A.SODIUM: 118}, fluids=[HTS])
    ctx = dataclasses.replace(ctx, patient=dataclasses.replace(ctx.patient, known=False))
    card = _by(evaluate_orders(ctx, TH))[C.HYPERTONIC_SALINE_ORDER]
    names = {v.name for v in card.values}
    assert not names & {
        V.TOTAL_BODY_WATER,
        V.DELTA_SODIUM_PER_LITER,
        V.MAX_VOLUME_24H,
        V.VOLUME_TO_GOAL_24H,
    }
    assert any("Age and sex could not be checked" in d for d in card.details)


# ---- laws ------------------------------------------------------------------------------------


@given(start=st.floats(100, 130), risen=st.floats(0, 7.9), weight=st.floats(40, 120))
def test_goal_volume_never_exceeds_limit_volume_and_shrinks_with_the_rise(
    start: float, risen: float, weight: float
) -> None:
    # Law (Verbalis 2013: the goal lies below the limit): the volume offered to the goal is
    # at most the volume to the limit, and it does not grow as more of the day is used.
    def card(already: float) -> dict[V, object]:
        series = sodium_series([(12, start), (1, start + already)])
        ctx = make_ctx(age=50, sex=Sex.MALE, weight=weight, fluids=[HTS], series={A.SODIUM: series})
        return _values(_by(evaluate_orders(ctx, TH))[C.HYPERTONIC_SALINE_ORDER])

    now, before = card(risen), card(0)
    goal_now = float(now.get(V.VOLUME_TO_GOAL_24H, 0.0))  # type: ignore[arg-type]
    assert goal_now <= float(now[V.MAX_VOLUME_24H]) + 0.01  # type: ignore[arg-type]
    assert goal_now <= float(before[V.VOLUME_TO_GOAL_24H]) + 0.01  # type: ignore[arg-type]


@given(
    na=st.floats(100, 134),
    tbw=st.floats(15, 60),
    v1=st.floats(0.01, 3),
    v2=st.floats(0.01, 3),
    key=st.sampled_from(["nacl_3", "nacl_0_9", "d5w", "lactated_ringers"]),
)
def test_projected_change_is_monotone_in_the_drafted_volume(
    na: float, tbw: float, v1: float, v2: float, key: str
) -> None:
    # Law (Adrogué & Madias 2000, a linear change per litre): more volume of the same fluid
    # moves sodium further in the same direction.
    from cds_service.clinical.infusates import resolve
    from cds_service.clinical.treatment import infusion_effect

    def change(litres: float) -> float:
        draft = DraftFluid("MedicationRequest/x", "x", named_solution=key, volume_l=litres)
        fluid = resolve(draft, TH)
        assert fluid is not None
        rise = infusion_effect(fluid, na, tbw, 10).projected_rise_24h
        assert rise is not None
        return rise

    small, large = sorted((v1, v2))
    a, b = change(small), change(large)
    assert (a <= b + 1e-9) if a >= 0 else (b <= a + 1e-9)
