"""The page behind every card's ``source.url``: ``/findings/{code}``.

For one finding code it says what the finding means, the rule that raises it, and the
thresholds the rule uses, each with the value in force (the institution's override, if any),
its unit and its published source, read from ``clinical/data/thresholds.toml`` and
``citations.toml``; nothing about a patient. CDS Hooks 2.0.1 (Card, ``source.url``): a page
to learn more about the source of the information on the card, not a patient drill-down.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from cds_service.clinical.findings import FINDING_DISPLAY, FindingCode
from cds_service.clinical.thresholds import threshold_entries


@dataclass(frozen=True, slots=True)
class FindingPage:
    meaning: str
    rule: str
    thresholds: tuple[str, ...] = ()


_CORRECTION = (
    "correction_limit_24h",
    "correction_limit_48h",
    "correction_limit_24h_high_risk",
    "correction_limit_48h_high_risk",
    "high_risk_sodium_at_most",
)
_ORDER = ("sodium_lower_normal", "infusate_hypotonic_below", "infusate_hypertonic_above")

PAGES: dict[FindingCode, FindingPage] = {
    FindingCode.TONICITY_UNKNOWN: FindingPage(
        "The serum sodium is low, and no measured serum osmolality was found in the window, so "
        "it is not yet known whether the low sodium is hypotonic (true hyponatremia), isotonic "
        "or hypertonic.",
        "Sodium below the lower limit and no measured serum osmolality within its lookback. "
        "The card shows the calculated osmolality as provisional and offers the missing tests.",
        ("sodium_lower_normal", "severity_mild_lower", "severity_moderate_lower"),
    ),
    FindingCode.HYPOTONIC: FindingPage(
        "The low sodium comes with a low effective osmolality: water is in excess of solute, "
        "the form of hyponatremia whose work-up continues with the urine studies. Urea and "
        "ethanol are ineffective osmoles and are set aside from the measured osmolality.",
        "Sodium below the lower limit and effective osmolality (measured minus urea nitrogen/2.8 "
        "and measured ethanol/4.6) below the hypotonic limit; or, in hyperglycemia, a "
        "glucose-corrected sodium (Hillier) still below the lower limit.",
        (
            "sodium_lower_normal",
            "tonicity_hypotonic_below",
            "urea_nitrogen_mg_dl_per_mmol_l",
            "ethanol_mg_dl_per_mmol_l",
            "hillier_factor",
        ),
    ),
    FindingCode.ISOTONIC: FindingPage(
        "The sodium is low but the measured osmolality is normal: consider a measurement "
        "artefact of high lipids or protein (pseudohyponatremia) or an isotonic solute.",
        "Sodium below the lower limit and effective osmolality between the two tonicity "
        "limits, without hyperglycemia.",
        (
            "tonicity_hypotonic_below",
            "tonicity_hypertonic_above",
            "triglycerides_clue_above",
            "total_protein_clue_above",
        ),
    ),
    FindingCode.HYPERTONIC: FindingPage(
        "The sodium is low because another solute (glucose, mannitol) draws water out of the "
        "cells; the glucose-corrected sodium tells what the sodium would be without it.",
        "Sodium below the lower limit and effective osmolality above the hypertonic limit, or "
        "glucose above the hyperglycemia limit with a glucose-corrected sodium that is not low.",
        ("tonicity_hypertonic_above", "hyperglycemia_above", "katz_factor", "hillier_factor"),
    ),
    FindingCode.OSMOLAL_GAP: FindingPage(
        "The measured osmolality exceeds the one calculated from sodium, glucose and urea: an "
        "unmeasured solute (ethanol, mannitol, toxic alcohols) is present.",
        "Measured minus calculated osmolality above the gap limit.",
        (
            "osmolal_gap_elevated_above",
            "glucose_mg_dl_per_mmol_l",
            "urea_nitrogen_mg_dl_per_mmol_l",
        ),
    ),
    FindingCode.DILUTE_URINE: FindingPage(
        "In hypotonic hyponatremia a dilute urine suggests the kidney is excreting water: "
        "relative excess water intake (high water intake, low solute intake).",
        "Hypotonic hyponatremia and urine osmolality at or below the dilute limit (inclusive); "
        "urine sodium is then not interpreted.",
        ("urine_osmolality_dilute_at_most", "urine_osmolality_minimal", "solute_load_typical"),
    ),
    FindingCode.LOW_URINE_SODIUM: FindingPage(
        "In hypotonic hyponatremia a low urine sodium suggests a low effective arterial "
        "blood volume (losses, heart failure, cirrhosis) rather than SIADH.",
        "Hypotonic hyponatremia, urine osmolality above the dilute limit and urine sodium at "
        "or below the low limit.",
        ("urine_osmolality_dilute_at_most", "urine_sodium_low_at_most"),
    ),
    FindingCode.SIADH_PATTERN: FindingPage(
        "The results fit the syndrome of inappropriate antidiuresis; the card lists which "
        "criteria are met and which remain open (diuretics, thyroid, adrenal, volume).",
        "Hypotonic hyponatremia, urine osmolality above the dilute limit and urine sodium above "
        "the low limit.",
        (
            "urine_osmolality_dilute_at_most",
            "urine_sodium_low_at_most",
            "siadh_uric_acid_below",
            "siadh_urea_nitrogen_below",
            "siadh_fe_urate_above",
            "siadh_fe_sodium_above",
            "free_t4_lower_normal",
            "cortisol_morning_from_hour",
            "cortisol_morning_until_hour",
            "renal_insufficiency_egfr_below",
        ),
    ),
    FindingCode.DRUG_ASSOCIATED: FindingPage(
        "An active medication is one associated with hyponatremia (thiazides, antidepressants, "
        "antiepileptics and others in the drug-class data file).",
        "Low sodium and an active medication whose ingredient is in a hyponatremia drug class.",
        ("sodium_lower_normal",),
    ),
    FindingCode.ENDOCRINE_SCREEN: FindingPage(
        "Hypothyroidism and adrenal insufficiency must be excluded before SIADH is called; "
        "the tests are missing in the window.",
        "Hypotonic hyponatremia and TSH or cortisol missing within their lookback, or TSH "
        "raised without a free T4 (only overt hypothyroidism excludes SIADH).",
        (
            "tsh_upper_normal",
            "free_t4_lower_normal",
            "cortisol_adrenal_unlikely_above",
            "cortisol_morning_from_hour",
            "cortisol_morning_until_hour",
        ),
    ),
    FindingCode.CORRECTION_RATE: FindingPage(
        "The sodium has risen faster than the limit that applies to this patient; too fast a "
        "rise risks osmotic demyelination.",
        "The largest rise within any 24-hour (or 48-hour) window of the episode exceeds the "
        "applicable limit; lower limits apply when risk factors are present.",
        _CORRECTION,
    ),
    FindingCode.IMPLAUSIBLE: FindingPage(
        "A result was not used: its value lies outside the physiological range or its unit "
        "cannot be converted. The card shows it as sent.",
        "A result outside its plausible range, or with a unit that does not convert.",
    ),
    FindingCode.OUT_OF_SCOPE: FindingPage(
        "The patient is younger than the adult scope of this service; no adult calculation is "
        "shown.",
        "Age at evaluation time below the adult age.",
        ("adult_age_years",),
    ),
    FindingCode.HYPOTONIC_FLUID_ORDER: FindingPage(
        "A drafted IV fluid is hypotonic to the patient's plasma while the sodium is low: it "
        "can lower the sodium further.",
        "A drafted fluid whose sodium plus potassium is below the hypotonic infusate limit, "
        "while sodium is below the lower limit.",
        _ORDER,
    ),
    FindingCode.ISOTONIC_FLUID_ORDER: FindingPage(
        "Isotonic saline is drafted in hyponatremia: it raises sodium in volume depletion but "
        "can lower it in SIADH; the card shows the expected change per litre.",
        "A drafted isotonic sodium-containing fluid while sodium is below the lower limit.",
        _ORDER,
    ),
    FindingCode.HYPERTONIC_SALINE_ORDER: FindingPage(
        "Hypertonic saline is drafted; the card shows the expected rise per litre and the "
        "correction limits that apply.",
        "A drafted fluid whose sodium plus potassium is above the hypertonic infusate limit.",
        ("infusate_hypertonic_above", "bolus_hypertonic_volume", *_CORRECTION[:3]),
    ),
    FindingCode.DRUG_ORDER_RISK: FindingPage(
        "A drafted drug is associated with hyponatremia while the sodium is low.",
        "A drafted medication in a hyponatremia drug class while sodium is below the lower limit.",
        ("sodium_lower_normal",),
    ),
    FindingCode.VAPTAN_ORDER: FindingPage(
        "A vasopressin-receptor antagonist is drafted: it can raise sodium quickly, so the "
        "correction limits apply.",
        "A drafted medication in the vasopressin-receptor antagonist class.",
        _CORRECTION[:3],
    ),
    FindingCode.POTASSIUM_ORDER: FindingPage(
        "Potassium is drafted while the sodium is low: potassium raises the serum sodium as "
        "sodium does, and counts toward the correction.",
        "A drafted potassium-containing order while sodium is below the lower limit.",
        ("sodium_lower_normal", *_CORRECTION[:1]),
    ),
    FindingCode.UNIDENTIFIED_ORDER: FindingPage(
        "A drafted IV fluid or drug could not be identified, so its effect on sodium cannot be "
        "estimated; the card shows what was sent.",
        "A drafted fluid or a drug coded in an unknown system while sodium is below the lower "
        "limit.",
        ("sodium_lower_normal",),
    ),
}


def page_context(code: FindingCode, thresholds: Any) -> dict[str, Any]:
    """What ``findings.html`` shows for ``code``, with the values in force in ``thresholds``."""
    page = PAGES[code]
    entries = threshold_entries()
    rows = []
    for key in page.thresholds:
        entry = entries.get(key)
        if entry is None:  # renamed in the data file: the page shows what exists
            continue
        in_force = getattr(thresholds, key, entry.value)
        rows.append(
            {
                "key": key,
                "value": _number(in_force),
                "default": _number(entry.value) if in_force != entry.value else "",
                "unit": entry.unit,
                "note": entry.note,
                "source": entry.citation,
            }
        )
    return {
        "code": code.value,
        "title": FINDING_DISPLAY[code],
        "meaning": page.meaning,
        "rule": page.rule,
        "rows": rows,
        "others": [(c.value, FINDING_DISPLAY[c]) for c in FindingCode if c is not code],
    }


def _number(value: float) -> str:
    return f"{value:g}"
