"""What the clinical core says: finding codes, named values, and the Finding record.

The codes and value names are the public contract of ``shared/DESIGN.md``; tests outside
this code base rely on them, so they are spelled here once and nowhere else.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from enum import StrEnum


class FindingCode(StrEnum):
    """``source.topic.code`` of a card (DESIGN.md, contract)."""

    TONICITY_UNKNOWN = "hyponatremia-tonicity-unknown"
    HYPOTONIC = "hypotonic-hyponatremia"
    ISOTONIC = "isotonic-hyponatremia"
    HYPERTONIC = "hypertonic-hyponatremia"
    OSMOLAL_GAP = "osmolal-gap-elevated"
    DILUTE_URINE = "dilute-urine"
    LOW_URINE_SODIUM = "low-urine-sodium"
    SIADH_PATTERN = "siadh-pattern"
    DRUG_ASSOCIATED = "drug-associated"
    ENDOCRINE_SCREEN = "endocrine-screen"
    CORRECTION_RATE = "correction-rate-exceeded"
    IMPLAUSIBLE = "implausible-result"
    OUT_OF_SCOPE = "out-of-scope"
    HYPOTONIC_FLUID_ORDER = "hypotonic-fluid-order"
    ISOTONIC_FLUID_ORDER = "isotonic-fluid-order"
    HYPERTONIC_SALINE_ORDER = "hypertonic-saline-order"
    DRUG_ORDER_RISK = "drug-order-risk"
    VAPTAN_ORDER = "vaptan-order"
    POTASSIUM_ORDER = "potassium-order"
    UNIDENTIFIED_ORDER = "unidentified-order"


#: Short human label per finding code (used as ``source.topic.display``).
FINDING_DISPLAY: dict[FindingCode, str] = {
    FindingCode.TONICITY_UNKNOWN: "Hyponatremia, tonicity not yet measured",
    FindingCode.HYPOTONIC: "Hypotonic hyponatremia",
    FindingCode.ISOTONIC: "Isotonic hyponatremia",
    FindingCode.HYPERTONIC: "Hypertonic hyponatremia",
    FindingCode.OSMOLAL_GAP: "Elevated osmolal gap",
    FindingCode.DILUTE_URINE: "Dilute urine (urine osmolality at most 100 mOsm/kg)",
    FindingCode.LOW_URINE_SODIUM: "Low urine sodium",
    FindingCode.SIADH_PATTERN: "SIADH pattern",
    FindingCode.DRUG_ASSOCIATED: "Medications associated with hyponatremia",
    FindingCode.ENDOCRINE_SCREEN: "Endocrine screen incomplete",
    FindingCode.CORRECTION_RATE: "Sodium correction rate above limit",
    FindingCode.IMPLAUSIBLE: "Result not used (implausible or unconvertible)",
    FindingCode.OUT_OF_SCOPE: "Patient outside the adult scope",
    FindingCode.HYPOTONIC_FLUID_ORDER: "Hypotonic fluid ordered in hyponatremia",
    FindingCode.ISOTONIC_FLUID_ORDER: "Isotonic sodium-containing fluid ordered in hyponatremia",
    FindingCode.HYPERTONIC_SALINE_ORDER: "Hypertonic saline ordered",
    FindingCode.DRUG_ORDER_RISK: "Hyponatremia-associated drug ordered",
    FindingCode.VAPTAN_ORDER: "Vasopressin-receptor antagonist ordered",
    FindingCode.POTASSIUM_ORDER: "Potassium ordered in hyponatremia",
    FindingCode.UNIDENTIFIED_ORDER: "Order that could not be identified",
}


class ValueName(StrEnum):
    """Names in ``extension["tonicity.values"]`` (DESIGN.md, contract)."""

    SERUM_SODIUM = "serum_sodium"
    MEASURED_OSMOLALITY = "measured_osmolality"
    CALCULATED_OSMOLALITY = "calculated_osmolality"
    OSMOLAL_GAP = "osmolal_gap"
    CORRECTED_SODIUM_KATZ = "corrected_sodium_katz"
    CORRECTED_SODIUM_HILLIER = "corrected_sodium_hillier"
    URINE_OSMOLALITY = "urine_osmolality"
    URINE_SODIUM = "urine_sodium"
    URINE_SERUM_ELECTROLYTE_RATIO = "urine_serum_electrolyte_ratio"
    SODIUM_CHANGE_24H = "sodium_change_24h"
    SODIUM_CHANGE_48H = "sodium_change_48h"
    CORRECTION_LIMIT_24H = "correction_limit_24h"
    TOTAL_BODY_WATER = "total_body_water"
    DELTA_SODIUM_PER_LITER = "delta_sodium_per_liter"
    MAX_VOLUME_24H = "max_volume_24h"
    SEVERITY = "severity"
    # Added with the clinical pathway revision (DESIGN.md lists them).
    EFFECTIVE_OSMOLALITY = "effective_osmolality"
    ETHANOL = "ethanol"
    CORRECTED_SEVERITY = "corrected_severity"
    CORRECTION_GOAL_24H = "correction_goal_24h"
    VOLUME_TO_GOAL_24H = "volume_to_goal_24h"
    EGFR = "egfr"
    FE_URATE = "fe_urate"
    FE_SODIUM = "fe_sodium"
    FREE_WATER_RELOWERING = "free_water_relowering"
    DESMOPRESSIN_DOSE = "desmopressin_dose"


#: The UCUM unit each value name is reported in (DESIGN.md, contract).
VALUE_UNITS: dict[ValueName, str] = {
    ValueName.SERUM_SODIUM: "mmol/L",
    ValueName.MEASURED_OSMOLALITY: "mosm/kg",
    ValueName.CALCULATED_OSMOLALITY: "mosm/kg",
    ValueName.OSMOLAL_GAP: "mosm/kg",
    ValueName.CORRECTED_SODIUM_KATZ: "mmol/L",
    ValueName.CORRECTED_SODIUM_HILLIER: "mmol/L",
    ValueName.URINE_OSMOLALITY: "mosm/kg",
    ValueName.URINE_SODIUM: "mmol/L",
    ValueName.URINE_SERUM_ELECTROLYTE_RATIO: "1",
    ValueName.SODIUM_CHANGE_24H: "mmol/L",
    ValueName.SODIUM_CHANGE_48H: "mmol/L",
    ValueName.CORRECTION_LIMIT_24H: "mmol/L",
    ValueName.TOTAL_BODY_WATER: "L",
    ValueName.DELTA_SODIUM_PER_LITER: "mmol/L",
    ValueName.MAX_VOLUME_24H: "L",
    ValueName.SEVERITY: "1",
    ValueName.EFFECTIVE_OSMOLALITY: "mosm/kg",
    ValueName.ETHANOL: "mg/dL",
    ValueName.CORRECTED_SEVERITY: "1",
    ValueName.CORRECTION_GOAL_24H: "mmol/L",
    ValueName.VOLUME_TO_GOAL_24H: "L",
    ValueName.EGFR: "mL/min/{1.73_m2}",
    ValueName.FE_URATE: "%",
    ValueName.FE_SODIUM: "%",
    ValueName.FREE_WATER_RELOWERING: "mL",
    ValueName.DESMOPRESSIN_DOSE: "ug",
}


class Urgency(StrEnum):
    """Clinical weight of a finding; maps one-to-one onto the CDS Hooks card indicator."""

    INFO = "info"
    WARNING = "warning"
    CRITICAL = "critical"


@dataclass(frozen=True, slots=True)
class Value:
    """One named number (or the severity word) with its UCUM unit."""

    name: ValueName
    value: float | str
    unit: str = ""

    def __post_init__(self) -> None:
        if not self.unit:
            object.__setattr__(self, "unit", VALUE_UNITS[self.name])


@dataclass(frozen=True, slots=True)
class InputUsed:
    """A measured input that a finding relied on, so a clinician can check it."""

    label: str  # e.g. "Serum sodium"
    value: float | str
    unit: str  # UCUM
    time: datetime | None = None
    source_id: str | None = None  # e.g. "Observation/na-1"
    note: str | None = None  # e.g. "preliminary", "whole blood, direct ISE"


@dataclass(frozen=True, slots=True)
class Finding:
    """One statement of the clinical core; the hooks layer renders it as one card.

    ``summary`` must stay under 140 characters. ``details`` are markdown lines for the
    clinician (the finding and its interpretation); ``formulas`` show the arithmetic with the
    patient's numbers; ``missing`` lists analytes whose tests are worth ordering (the hooks
    layer turns them into ServiceRequest suggestions); ``remove_draft`` names a draft order
    (``ResourceType/id``) that the card suggests deleting.
    """

    code: FindingCode
    urgency: Urgency
    summary: str
    details: tuple[str, ...] = ()
    values: tuple[Value, ...] = ()
    inputs: tuple[InputUsed, ...] = ()
    formulas: tuple[str, ...] = ()
    sources: tuple[str, ...] = ()
    missing: tuple[str, ...] = ()  # Analyte values (see clinical.context.Analyte)
    next_steps: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    remove_draft: str | None = None
    extra: dict[str, object] = field(default_factory=dict, hash=False, compare=False)

    def __post_init__(self) -> None:
        if len(self.summary) >= 140:
            raise ValueError(f"summary of {self.code} is {len(self.summary)} characters")
        if not self.summary.strip():
            raise ValueError(f"summary of {self.code} is empty")
