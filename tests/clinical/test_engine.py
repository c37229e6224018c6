"""The two entry points on invented Larkspur Valley Hospital patients, and laws of the engine."""

from __future__ import annotations

from datetime import timedelta

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.clinical.context import (
    Analyte,
    ConditionCategory,
    DraftFluid,
    DraftMedication,
    RejectedResult,
    Sex,
)
from cds_service.clinical.engine import evaluate_orders, evaluate_workup
from cds_service.clinical.findings import VALUE_UNITS, Finding, FindingCode, Urgency, ValueName
from cds_service.clinical.notes import CAUTION
from cds_service.clinical.thresholds import Thresholds, load_thresholds

from .conftest import NOW, make_ctx, sodium_series

A, C, V = Analyte, FindingCode, ValueName
TH = load_thresholds()


def by_code(findings: list[Finding]) -> dict[FindingCode, Finding]:
    return {f.code: f for f in findings}


def values(f: Finding) -> dict[ValueName, float | str]:
    return {v.name: v.value for v in f.values}


# --- Patient-view -------------------------------------------------------------------------------


def test_normal_sodium_gives_no_findings(th: Thresholds) -> None:
    # DESIGN.md contract: a normal serum sodium gives no cards.
    assert evaluate_workup(make_ctx({A.SODIUM: 139, A.GLUCOSE: 90}), th) == []


def test_child_gets_only_out_of_scope(th: Thresholds) -> None:
    ctx = make_ctx(
        {A.SODIUM: 118, A.OSMOLALITY: 250},
        age=12,
        fluids=[DraftFluid("MedicationRequest/f", "x", nacl_percent=3)],
    )
    for evaluate in (evaluate_workup, evaluate_orders):
        (only,) = evaluate(ctx, th)
        assert only.code is C.OUT_OF_SCOPE and not only.values


def test_hypotonic_siadh_pattern(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): osm < 275, urine osm > 100, urine Na > 30 -> SIADH
    # considered; thyroid and adrenal function must be checked.
    ctx = make_ctx(
        {
            A.SODIUM: 121,
            A.OSMOLALITY: 256,
            A.GLUCOSE: 95,
            A.UREA_NITROGEN: 8,
            A.URINE_OSMOLALITY: 450,
            A.URINE_SODIUM: 62,
            A.URINE_POTASSIUM: 40,
        },
        meds=[("sertraline", "active")],
    )
    found = by_code(evaluate_workup(ctx, th))
    assert set(found) == {C.HYPOTONIC, C.SIADH_PATTERN, C.DRUG_ASSOCIATED, C.ENDOCRINE_SCREEN}
    hypo = found[C.HYPOTONIC]
    assert hypo.urgency is Urgency.CRITICAL  # profound (< 125)
    assert hypo.summary == (
        "Sodium 121 mmol/L (profound), measured osmolality 256 mOsm/kg: hypotonic hyponatremia"
    )
    assert values(hypo)[V.SEVERITY] == "profound"
    # Dorwart & Chalmers 1975: 2 x 121 + 95/18 + 8/2.8 = 250.1
    assert values(hypo)[V.CALCULATED_OSMOLALITY] == pytest.approx(250.1, abs=0.05)
    siadh = found[C.SIADH_PATTERN]
    # Furst 2000: (62 + 40) / 121 = 0.84 -> 500-700 mL/day.
    assert values(siadh)[V.URINE_SERUM_ELECTROLYTE_RATIO] == pytest.approx(0.84)
    assert any("500-700 mL/day" in d for d in siadh.details)
    assert "4 of 6 essential criteria met" in siadh.summary  # euvolemia, endocrine open
    assert set(siadh.missing) == {"tsh", "cortisol"}
    assert found[C.ENDOCRINE_SCREEN].missing == ("tsh", "cortisol")
    assert "sertraline" in found[C.DRUG_ASSOCIATED].summary


def test_diuretic_and_endocrine_results_change_the_criteria(th: Thresholds) -> None:
    # Creatinine 0.8 mg/dL, woman of 70: CKD-EPI 2021 (Inker 2021) eGFR about 79, not renal
    # insufficiency; cortisol drawn 08:00, a morning value.
    ctx = make_ctx(
        {
            A.SODIUM: 128,
            A.OSMOLALITY: 268,
            A.URINE_OSMOLALITY: 380,
            A.URINE_SODIUM: 55,
            A.TSH: 1.8,
            A.CORTISOL: 19,
            A.CREATININE: 0.8,
        },
        meds=[("hydrochlorothiazide", "active")],
    )
    found = by_code(evaluate_workup(ctx, th))
    assert C.ENDOCRINE_SCREEN not in found
    siadh = found[C.SIADH_PATTERN]
    assert any("not met: no recent diuretic use" in d for d in siadh.details)
    assert any("met: no adrenal, thyroid" in d and "✓" in d for d in siadh.details)
    assert found[C.HYPOTONIC].urgency is Urgency.INFO  # moderate


def test_tonicity_unknown_shows_calculated_as_provisional(th: Thresholds) -> None:
    ctx = make_ctx({A.SODIUM: 128, A.GLUCOSE: 108, A.UREA_NITROGEN: 14})
    (f,) = evaluate_workup(ctx, th)
    assert f.code is C.TONICITY_UNKNOWN and "provisional" in f.summary
    assert values(f)[V.CALCULATED_OSMOLALITY] == pytest.approx(267.0)  # 256 + 6 + 5
    assert {"osmolality", "urine_osmolality", "urine_sodium"} <= set(f.missing)
    assert V.MEASURED_OSMOLALITY not in values(f)


def test_isotonic_with_pseudohyponatremia_clue(th: Thresholds) -> None:
    # Waugh 1969 / common practice: severe hypertriglyceridemia lowers plasma water.
    ctx = make_ctx({A.SODIUM: 129, A.OSMOLALITY: 286, A.TRIGLYCERIDES: 2400})
    found = by_code(evaluate_workup(ctx, th))
    iso = found[C.ISOTONIC]
    assert "pseudohyponatremia" in iso.summary
    assert any("2400" in d and "clue" in d for d in iso.details)
    assert iso.missing == ("total_protein",)


def test_hypertonic_hyperglycemia_reports_both_corrections(th: Thresholds) -> None:
    # Katz 1973: 125 + 1.6 x 6 = 134.6; Hillier 1999: 125 + 2.4 x 6 = 139.4 (glucose 700).
    ctx = make_ctx({A.SODIUM: 125, A.OSMOLALITY: 300, A.GLUCOSE: 700, A.UREA_NITROGEN: 20})
    found = by_code(evaluate_workup(ctx, th))
    hyper = found[C.HYPERTONIC]
    assert values(hyper)[V.CORRECTED_SODIUM_KATZ] == pytest.approx(134.6)
    assert values(hyper)[V.CORRECTED_SODIUM_HILLIER] == pytest.approx(139.4)
    assert C.HYPOTONIC not in found and C.ISOTONIC not in found


def test_osmolal_gap(th: Thresholds) -> None:
    # Gap above 10 mOsm/kg (common practice): 290 measured vs 2 x 126 + 5 + 5 = 262.
    ctx = make_ctx({A.SODIUM: 126, A.OSMOLALITY: 290, A.GLUCOSE: 90, A.UREA_NITROGEN: 14})
    gap = by_code(evaluate_workup(ctx, th))[C.OSMOLAL_GAP]
    assert values(gap)[V.OSMOLAL_GAP] == pytest.approx(28.0)
    ctx = make_ctx({A.SODIUM: 126, A.OSMOLALITY: 270, A.GLUCOSE: 90, A.UREA_NITROGEN: 14})
    assert C.OSMOLAL_GAP not in by_code(evaluate_workup(ctx, th))


def test_dilute_urine_and_low_urine_sodium(th: Thresholds) -> None:
    # Spasovski 2014 section 7.2: urine osm <= 100 -> relative excess water intake, and urine
    # sodium is then not interpreted; urine Na <= 30 with urine osm > 100 -> low effective
    # arterial volume.
    ctx = make_ctx(
        {A.SODIUM: 127, A.OSMOLALITY: 258, A.URINE_OSMOLALITY: 70, A.URINE_SODIUM: 12},
        conditions=[ConditionCategory.HEART_FAILURE],
    )
    found = by_code(evaluate_workup(ctx, th))
    assert C.DILUTE_URINE in found
    assert C.LOW_URINE_SODIUM not in found and C.SIADH_PATTERN not in found
    # Berl 2008 (from memory): 250 mOsm/day at 50 mOsm/kg allows only 5 L/day.
    assert any("= 5 L/day" in d for d in found[C.DILUTE_URINE].details)
    ctx = make_ctx(
        {A.SODIUM: 127, A.OSMOLALITY: 258, A.URINE_OSMOLALITY: 350, A.URINE_SODIUM: 12},
        conditions=[ConditionCategory.HEART_FAILURE],
    )
    found = by_code(evaluate_workup(ctx, th))
    assert C.DILUTE_URINE not in found
    assert any("heart failure" in d for d in found[C.LOW_URINE_SODIUM].details)


def test_reset_osmostat_hint(th: Thresholds) -> None:
    series = sodium_series([(24 * 20, 132), (24 * 10, 131), (2, 132)])
    ctx = make_ctx(
        {A.OSMOLALITY: 268, A.URINE_OSMOLALITY: 300, A.URINE_SODIUM: 50}, series={A.SODIUM: series}
    )
    hypo = by_code(evaluate_workup(ctx, th))[C.HYPOTONIC]
    assert any("reset osmostat" in d for d in hypo.details)


def test_correction_rate_on_patient_view(th: Thresholds) -> None:
    series = sodium_series([(22, 112), (1, 124)])
    found = by_code(evaluate_workup(make_ctx(series={A.SODIUM: series}), th))
    assert found[C.CORRECTION_RATE].urgency is Urgency.CRITICAL
    assert values(found[C.CORRECTION_RATE])[V.SODIUM_CHANGE_24H] == 12


def test_implausible_results(th: Thresholds) -> None:
    bad_na = RejectedResult(
        A.SODIUM,
        "1390 mmol/L",
        "outside the plausible range",
        NOW - timedelta(hours=1),
        "Observation/na-bad",
    )
    bad_tsh = RejectedResult(
        A.TSH, "2.1 furlongs", "unit cannot be converted", None, "Observation/tsh-bad"
    )
    normal = make_ctx({A.SODIUM: 140}, rejected=[bad_tsh])
    assert evaluate_workup(normal, th) == []
    normal = make_ctx({A.SODIUM: 140}, rejected=[bad_na, bad_tsh])
    (f,) = evaluate_workup(normal, th)
    # A normal chart stays quiet about unrelated results but not about a rejected sodium.
    assert f.code is C.IMPLAUSIBLE and "1390" in f.summary
    assert not any("furlongs" in d for d in f.details)
    low = make_ctx({A.SODIUM: 128}, rejected=[bad_na, bad_tsh])
    f = by_code(evaluate_workup(low, th))[C.IMPLAUSIBLE]
    assert f.summary.startswith("2 results not used") and any("furlongs" in d for d in f.details)


# --- Orders -------------------------------------------------------------------------------------


def test_hypotonic_fluid_order_suggests_removal(th: Thresholds) -> None:
    ctx = make_ctx(
        {A.SODIUM: 127},
        fluids=[
            DraftFluid("MedicationRequest/half", "0.45% NaCl 1 L", nacl_percent=0.45),
            DraftFluid("MedicationRequest/other", "D5W", dextrose_percent=5, selected=False),
        ],
    )
    found = by_code(evaluate_orders(ctx, th))
    f = found[C.HYPOTONIC_FLUID_ORDER]
    assert f.urgency is Urgency.WARNING and f.remove_draft == "MedicationRequest/half"
    # Adrogué & Madias 2000: (77 - 127) / (0.45 x 60 + 1) = -1.8 mmol/L per litre (70 y woman).
    assert values(f)[V.DELTA_SODIUM_PER_LITER] == pytest.approx(-1.8)
    assert not any("MedicationRequest/other" in d for d in f.details)


def test_no_fluid_finding_when_sodium_is_normal(th: Thresholds) -> None:
    ctx = make_ctx(
        {A.SODIUM: 140}, fluids=[DraftFluid("MedicationRequest/h", "x", nacl_percent=0.45)]
    )
    assert evaluate_orders(ctx, th) == []


def test_isotonic_fluid_mentions_urine_osmolality(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): in SIADH with urine osm above the infusate's, isotonic
    # saline can lower sodium.
    ctx = make_ctx(
        {A.SODIUM: 126, A.URINE_OSMOLALITY: 520},
        fluids=[DraftFluid("MedicationRequest/ns", "x", named_solution="nacl_0_9")],
    )
    f = by_code(evaluate_orders(ctx, th))[C.ISOTONIC_FLUID_ORDER]
    assert f.urgency is Urgency.INFO
    assert "520" in f.details[0] and "308" in f.details[0]
    unknown = make_ctx(
        {A.SODIUM: 126}, fluids=[DraftFluid("MedicationRequest/ns", "x", named_solution="nacl_0_9")]
    )
    assert by_code(evaluate_orders(unknown, th))[C.ISOTONIC_FLUID_ORDER].missing == (
        "urine_osmolality",
    )


def test_hypertonic_saline_adrogue_madias_example(th: Thresholds) -> None:
    # Adrogué & Madias 2000 NEJM worked example (from memory): elderly woman, 50 kg, sodium
    # 108; 1 L of 3 % saline raises sodium 17.2 mmol/L. Sodium <= 105 is not reached, so the
    # ordinary 10 mmol/L limit applies: 10 / 17.2 = 0.58 L.
    ctx = make_ctx(
        {A.SODIUM: 108},
        age=78,
        sex=Sex.FEMALE,
        weight=50,
        fluids=[
            DraftFluid(
                "MedicationRequest/hts", "3% NaCl", named_solution="nacl_3", rate_ml_per_h=40
            )
        ],
    )
    f = by_code(evaluate_orders(ctx, th))[C.HYPERTONIC_SALINE_ORDER]
    v = values(f)
    assert v[V.TOTAL_BODY_WATER] == 22.5
    assert v[V.DELTA_SODIUM_PER_LITER] == 17.2
    assert v[V.MAX_VOLUME_24H] == pytest.approx(0.58, abs=0.01)
    assert v[V.CORRECTION_LIMIT_24H] == 10
    # 40 mL/h x 24 h = 0.96 L -> +16.5 mmol/L, above the limit.
    assert any("+16.5" in c for c in f.cautions)
    # Verbalis 2013: goal 8 (top of 4-8) is offered, the limit shown beside it: 8 / 17.2.
    assert v[V.CORRECTION_GOAL_24H] == 8
    assert v[V.VOLUME_TO_GOAL_24H] == pytest.approx(0.47, abs=0.01)
    # Spasovski 2014 section 8: no coded symptoms and no documented acute fall.
    assert any("does not advise hypertonic saline" in d for d in f.details)
    assert f.remove_draft is None


def test_hypertonic_saline_high_risk_limit(th: Thresholds) -> None:
    # Verbalis 2013: alcohol use disorder -> 8 mmol/L in 24 h; 8 / 17.2 = 0.47 L.
    ctx = make_ctx(
        {A.SODIUM: 108},
        age=78,
        sex=Sex.FEMALE,
        weight=50,
        conditions=[ConditionCategory.ALCOHOL_USE_DISORDER],
        fluids=[DraftFluid("MedicationRequest/hts", "x", nacl_percent=3)],
    )
    f = by_code(evaluate_orders(ctx, th))[C.HYPERTONIC_SALINE_ORDER]
    assert values(f)[V.MAX_VOLUME_24H] == pytest.approx(0.47, abs=0.01)
    assert any("alcohol use disorder" in d for d in f.details)


def test_hypertonic_saline_without_weight_or_sex(th: Thresholds) -> None:
    fluid = DraftFluid("MedicationRequest/hts", "x", named_solution="nacl_3")
    no_weight = make_ctx({A.SODIUM: 118}, weight=None, fluids=[fluid])
    f = by_code(evaluate_orders(no_weight, th))[C.HYPERTONIC_SALINE_ORDER]
    assert V.TOTAL_BODY_WATER not in values(f) and V.MAX_VOLUME_24H not in values(f)
    assert any("body weight" in d for d in f.details)
    unknown_sex = make_ctx({A.SODIUM: 118}, sex=Sex.UNKNOWN, age=40, weight=70, fluids=[fluid])
    f = by_code(evaluate_orders(unknown_sex, th))[C.HYPERTONIC_SALINE_ORDER]
    assert values(f)[V.TOTAL_BODY_WATER] == 35.0  # the smaller of 0.6 and 0.5 x 70
    assert any("man" in line and "42" in line for line in f.formulas)
    assert any("Sex or age not recorded" in line for line in f.details)


def test_drug_and_vaptan_orders(th: Thresholds) -> None:
    drafts = [
        DraftMedication("MedicationRequest/cbz", "Carbamazepine 200 mg", ("carbamazepine",), ()),
        DraftMedication("MedicationRequest/tol", "Tolvaptan 15 mg", ("tolvaptan",), ()),
    ]
    found = by_code(evaluate_orders(make_ctx({A.SODIUM: 126}, drafts=drafts), th))
    risk = found[C.DRUG_ORDER_RISK]
    assert risk.remove_draft == "MedicationRequest/cbz" and "carbamazepine" in risk.summary.lower()
    vaptan = found[C.VAPTAN_ORDER]
    text = " ".join(vaptan.cautions).lower()
    for phrase in (
        "overcorrection",
        "sodium every",
        "fluid in the first 24 h",
        "liver",
        "hypovolemic",
    ):
        assert phrase in text
    normal = by_code(evaluate_orders(make_ctx({A.SODIUM: 138}, drafts=drafts), th))
    assert set(normal) == {C.VAPTAN_ORDER}  # vaptan always; drug risk only when Na < 135


# --- Laws ---------------------------------------------------------------------------------------

analytes = st.dictionaries(
    st.sampled_from(
        [
            A.SODIUM,
            A.OSMOLALITY,
            A.GLUCOSE,
            A.UREA_NITROGEN,
            A.URINE_OSMOLALITY,
            A.URINE_SODIUM,
            A.URINE_POTASSIUM,
            A.TRIGLYCERIDES,
            A.TOTAL_PROTEIN,
            A.TSH,
            A.CORTISOL,
            A.POTASSIUM,
            A.URIC_ACID,
        ]
    ),
    st.one_of(st.floats(0.5, 2000), st.sampled_from([0.0, 1e-9, 1e7])),
)
fluids = st.lists(
    st.builds(
        DraftFluid,
        resource_id=st.just("MedicationRequest/f"),
        display=st.sampled_from(["3% saline", "D5W", "NS", "x", "lactated Ringer's"]),
        nacl_percent=st.one_of(st.none(), st.sampled_from([0.45, 0.9, 3.0])),
        rate_ml_per_h=st.one_of(st.none(), st.floats(1, 500)),
    ),
    max_size=3,
)
drafts = st.lists(
    st.builds(
        DraftMedication,
        resource_id=st.just("MedicationRequest/m"),
        display=st.just("x"),
        names=st.tuples(st.sampled_from(["tolvaptan", "sertraline", "tramadol", "paracetamol"])),
        rxnorm=st.just(()),
    ),
    max_size=3,
)


@settings(max_examples=150, deadline=None)
@given(
    labs=analytes,
    na=st.one_of(st.floats(95, 150), st.sampled_from([0.0, 0.5, 1e6])),
    fl=fluids,
    dr=drafts,
    sex=st.sampled_from(list(Sex)),
    weight=st.one_of(st.none(), st.floats(30, 200), st.just(0.0)),
    conditions=st.lists(st.sampled_from(list(ConditionCategory)), max_size=3),
    history=st.lists(st.tuples(st.floats(0, 100), st.floats(100, 150)), max_size=6),
)
def test_engine_laws(labs, na, fl, dr, sex, weight, conditions, history) -> None:  # type: ignore[no-untyped-def]
    # DESIGN.md contract: at most one finding per code, summaries under 140 characters, value
    # names and units from the contract table; every finding carries the standing caution.
    labs[A.SODIUM] = na
    series = {A.SODIUM: sodium_series([*history, (1, na)])}
    ctx = make_ctx(
        labs, sex=sex, weight=weight, conditions=conditions, fluids=fl, drafts=dr, series=series
    )
    for evaluate in (evaluate_workup, evaluate_orders):
        found = evaluate(ctx, TH)
        codes = [f.code for f in found]
        assert len(codes) == len(set(codes))
        for f in found:
            assert 0 < len(f.summary) < 140
            assert CAUTION in f.cautions
            for v in f.values:
                assert v.unit == VALUE_UNITS[v.name]
                if v.name is V.SEVERITY:
                    assert v.value in ("mild", "moderate", "profound")
        tonicity = {C.TONICITY_UNKNOWN, C.HYPOTONIC, C.ISOTONIC, C.HYPERTONIC} & set(codes)
        assert len(tonicity) <= 1
        if evaluate is evaluate_workup:
            assert bool(tonicity) == (na < 135)


def test_supplemental_siadh_criteria_from_fractional_excretions(th: Thresholds) -> None:
    # Fenske 2008 (JCEM 93:2991, Abstract, Results: FE urate cut-off 12 %) supports SIADH;
    # Spasovski 2014 (supplemental criteria table, not yet read in the original):
    # FE urea > 55 %, uric acid < 4 mg/dL. FE urate = 40 x 0.8 / (3 x 60) = 17.8 %;
    # FE urea = 600 x 0.8 / (8 x 60) = 100 %.
    ctx = make_ctx(
        {
            A.SODIUM: 127,
            A.OSMOLALITY: 262,
            A.URINE_OSMOLALITY: 420,
            A.URINE_SODIUM: 70,
            A.URIC_ACID: 3.0,
            A.URINE_URIC_ACID: 40,
            A.CREATININE: 0.8,
            A.URINE_CREATININE: 60,
            A.UREA_NITROGEN: 8,
            A.URINE_UREA_NITROGEN: 600,
        }
    )
    siadh = by_code(evaluate_workup(ctx, th))[C.SIADH_PATTERN]
    text = "\n".join(siadh.details)
    assert "✓ met: fractional excretion of uric acid > 12 % (17.8 %)" in text
    assert "✓ met: fractional excretion of urea > 55 % (100 %)" in text
    assert "✓ met: serum uric acid < 4 mg/dL (3 mg/dL)" in text


def test_hypertonic_without_hyperglycemia_names_other_osmoles(th: Thresholds) -> None:
    # Spasovski 2014 (from memory): > 295 mOsm/kg without hyperglycemia -> mannitol, contrast...
    ctx = make_ctx(
        {A.SODIUM: 131, A.OSMOLALITY: 318, A.GLUCOSE: 110, A.UREA_NITROGEN: 14},
        meds=[("mannitol", "active")],
    )
    found = by_code(evaluate_workup(ctx, th))
    hyper = found[C.HYPERTONIC]
    assert V.CORRECTED_SODIUM_KATZ not in values(hyper)
    assert "other osmoles" in hyper.summary
    assert any(d.startswith("mannitol recorded") for d in hyper.details)
    assert C.DRUG_ASSOCIATED not in found  # an osmotic agent is not a cause of SIADH
    # Dorwart & Chalmers 1975: 318 - (2 x 131 + 110/18 + 14/2.8) = 318 - 273.1 = 44.9
    assert values(found[C.OSMOLAL_GAP])[V.OSMOLAL_GAP] == pytest.approx(44.9, abs=0.05)


def test_most_urgent_first(th: Thresholds) -> None:
    series = sodium_series([(22, 112), (1, 124)])
    ctx = make_ctx({A.OSMOLALITY: 250, A.URINE_SODIUM: 14}, series={A.SODIUM: series})
    order = [f.urgency for f in evaluate_workup(ctx, th)]
    rank = {Urgency.CRITICAL: 0, Urgency.WARNING: 1, Urgency.INFO: 2}
    assert order == sorted(order, key=rank.__getitem__) and order[0] is Urgency.CRITICAL


def test_dilute_urine_with_measured_solute_excretion(th: Thresholds) -> None:
    # Berl 2008 (from memory): urine flow = solute excretion / urine osmolality; 80 mOsm/kg
    # in 3 L is 240 mOsm/day, which at 50 mOsm/kg allows at most 4.8 L/day.
    ctx = make_ctx(
        {A.SODIUM: 126, A.OSMOLALITY: 259, A.URINE_OSMOLALITY: 80, A.URINE_VOLUME_24H: 3.0}
    )
    f = by_code(evaluate_workup(ctx, th))[C.DILUTE_URINE]
    assert any("240 mOsm/day" in d and "4.8 L/day" in d for d in f.details)
