"""The clinical core's input: a patient's chemistry, medications, problems and draft orders.

The FHIR layer (``cds_service.fhir``) builds a :class:`ClinicalContext` from what a record
system sends; the clinical core reads it and never sees FHIR. Every number is already in the
analyte's canonical UCUM unit (:data:`CANONICAL_UNITS`).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from enum import StrEnum


class Analyte(StrEnum):
    SODIUM = "sodium"  # serum/plasma or blood; see LabResult.direct_ise
    POTASSIUM = "potassium"
    GLUCOSE = "glucose"
    UREA_NITROGEN = "urea_nitrogen"  # urea by moles is converted to urea nitrogen mass
    CREATININE = "creatinine"
    OSMOLALITY = "osmolality"  # measured serum/plasma osmolality
    URINE_OSMOLALITY = "urine_osmolality"
    URINE_SODIUM = "urine_sodium"
    URINE_POTASSIUM = "urine_potassium"
    URINE_CREATININE = "urine_creatinine"
    URINE_UREA_NITROGEN = "urine_urea_nitrogen"
    URINE_URIC_ACID = "urine_uric_acid"
    URINE_VOLUME_24H = "urine_volume_24h"
    TRIGLYCERIDES = "triglycerides"
    TOTAL_PROTEIN = "total_protein"
    URIC_ACID = "uric_acid"
    TSH = "tsh"
    CORTISOL = "cortisol"
    BODY_WEIGHT = "body_weight"
    BODY_HEIGHT = "body_height"
    ETHANOL = "ethanol"  # serum/plasma/blood ethanol: an ineffective osmole
    FREE_T4 = "free_t4"  # free thyroxine
    EGFR = "egfr"  # estimated GFR as reported by the laboratory


#: Canonical UCUM unit per analyte: the FHIR layer converts every value into it.
CANONICAL_UNITS: dict[Analyte, str] = {
    Analyte.SODIUM: "mmol/L",
    Analyte.POTASSIUM: "mmol/L",
    Analyte.GLUCOSE: "mg/dL",
    Analyte.UREA_NITROGEN: "mg/dL",
    Analyte.CREATININE: "mg/dL",
    Analyte.OSMOLALITY: "mosm/kg",
    Analyte.URINE_OSMOLALITY: "mosm/kg",
    Analyte.URINE_SODIUM: "mmol/L",
    Analyte.URINE_POTASSIUM: "mmol/L",
    Analyte.URINE_CREATININE: "mg/dL",
    Analyte.URINE_UREA_NITROGEN: "mg/dL",
    Analyte.URINE_URIC_ACID: "mg/dL",
    Analyte.URINE_VOLUME_24H: "L",
    Analyte.TRIGLYCERIDES: "mg/dL",
    Analyte.TOTAL_PROTEIN: "g/dL",
    Analyte.URIC_ACID: "mg/dL",
    Analyte.TSH: "m[IU]/L",
    Analyte.CORTISOL: "ug/dL",
    Analyte.BODY_WEIGHT: "kg",
    Analyte.BODY_HEIGHT: "cm",
    Analyte.ETHANOL: "mg/dL",
    Analyte.FREE_T4: "ng/dL",
    Analyte.EGFR: "mL/min/{1.73_m2}",
}


class ConditionCategory(StrEnum):
    HEART_FAILURE = "heart_failure"
    CIRRHOSIS = "cirrhosis"  # cirrhosis or advanced liver disease
    NEPHROTIC_SYNDROME = "nephrotic_syndrome"
    ADVANCED_KIDNEY_DISEASE = "advanced_kidney_disease"
    ALCOHOL_USE_DISORDER = "alcohol_use_disorder"
    MALNUTRITION = "malnutrition"
    HYPOTHYROIDISM = "hypothyroidism"
    ADRENAL_INSUFFICIENCY = "adrenal_insufficiency"
    SIADH = "siadh"
    VOMITING_DIARRHEA = "vomiting_diarrhea"
    # Triggers of SIADH the work-up names when the record shows them (Spasovski 2014).
    MALIGNANCY = "malignancy"
    CNS_DISORDER = "cns_disorder"
    PULMONARY_DISEASE = "pulmonary_disease"
    NAUSEA = "nausea"
    PAIN = "pain"
    POSTOPERATIVE = "postoperative"
    # Symptoms of hyponatremia as the 2014 European guideline classes them (Spasovski 2014,
    # section 5.2 table): severe (seizures, coma, deep somnolence, cardiorespiratory distress;
    # vomiting is also severe, coded above with diarrhoea) and moderately severe (confusion,
    # headache). Read from coded problems; otherwise "to be assessed at the bedside".
    SYMPTOM_SEIZURE = "symptom_seizure"
    SYMPTOM_COMA = "symptom_coma"
    SYMPTOM_SOMNOLENCE = "symptom_somnolence"
    SYMPTOM_CARDIORESPIRATORY_DISTRESS = "symptom_cardiorespiratory_distress"
    SYMPTOM_CONFUSION = "symptom_confusion"
    SYMPTOM_HEADACHE = "symptom_headache"


class DisplayUnits(StrEnum):
    """Which units card text shows clinicians (machine values stay in CANONICAL_UNITS)."""

    CONVENTIONAL = "conventional"  # mg/dL, g/dL, ug/dL ...
    SI = "si"  # mmol/L, umol/L, g/L, nmol/L ...


class Sex(StrEnum):
    """Administrative gender as far as the body-water fraction needs it."""

    MALE = "male"
    FEMALE = "female"
    UNKNOWN = "unknown"


@dataclass(frozen=True, slots=True)
class LabResult:
    analyte: Analyte
    value: float  # in CANONICAL_UNITS[analyte]
    time: datetime  # timezone-aware
    source_id: str  # "Observation/<id>"
    raw: str  # as sent, e.g. "135 mEq/L"
    comparator: str | None = None  # "<", "<=", ">=", ">" as sent
    preliminary: bool = False
    direct_ise: bool = False  # whole/arterial blood measured by blood-gas analyser
    loinc: str | None = None

    @property
    def unit(self) -> str:
        return CANONICAL_UNITS[self.analyte]


@dataclass(frozen=True, slots=True)
class RejectedResult:
    """A result that was not used: outside the plausible range or unit not convertible."""

    analyte: Analyte | None
    raw: str  # the raw value and unit as sent
    reason: str  # clinician-readable
    time: datetime | None
    source_id: str


@dataclass(frozen=True, slots=True)
class MedicationEntry:
    names: tuple[str, ...]  # lowercase generic ingredient names
    rxnorm: tuple[str, ...]  # RxNorm codes found on the medication
    display: str  # as recorded
    status: str  # FHIR status as sent
    kind: str  # MedicationRequest | MedicationStatement | MedicationAdministration
    source_id: str
    start: datetime | None = None


@dataclass(frozen=True, slots=True)
class ConditionEntry:
    category: ConditionCategory
    display: str
    code: str  # "system|code"
    source_id: str


@dataclass(frozen=True, slots=True)
class DraftFluid:
    """An IV fluid found among draft orders; composition as far as the order states it."""

    resource_id: str  # "MedicationRequest/<id>"
    display: str
    nacl_percent: float | None = None  # e.g. 0.9, 0.45, 3
    dextrose_percent: float | None = None  # e.g. 5
    added_potassium_mmol_per_l: float | None = None
    named_solution: str | None = None  # infusate key for named mixtures, e.g. "lactated_ringers"
    volume_l: float | None = None
    rate_ml_per_h: float | None = None
    selected: bool = True


@dataclass(frozen=True, slots=True)
class DraftMedication:
    resource_id: str
    display: str
    names: tuple[str, ...]
    rxnorm: tuple[str, ...]
    selected: bool = True


@dataclass(frozen=True, slots=True)
class DraftUnidentified:
    """A draft order that looks like an IV fluid, or a drug coded in a system Tonicity does
    not know, and that could not be identified: shown to the clinician, never ignored."""

    resource_id: str
    display: str  # what was sent, as far as it can be shown
    kind: str  # "fluid" | "drug"
    reason: str  # clinician-readable: why it could not be identified
    codes: tuple[str, ...] = ()  # "system|code" as sent
    selected: bool = True


@dataclass(frozen=True, slots=True)
class PatientFacts:
    patient_id: str | None
    age_years: float | None  # at evaluation time
    sex: Sex = Sex.UNKNOWN
    #: False when no readable Patient resource was had: age and sex were never checked, so
    #: no card may treat the patient as a known adult or use sex-specific numbers unqualified.
    known: bool = True


@dataclass(frozen=True, slots=True)
class ClinicalContext:
    """Everything the clinical core may use, at one evaluation time ``now``.

    ``series`` holds every usable result per analyte, oldest first (sodium series feed the
    correction-rate surveillance and the trend view). ``current`` holds the result the work-up
    uses per analyte: the latest within that analyte's lookback, with glucose and urea nitrogen
    paired to the current sodium draw (the FHIR layer chooses them).
    """

    now: datetime
    patient: PatientFacts
    series: Mapping[Analyte, tuple[LabResult, ...]] = field(default_factory=dict)
    current: Mapping[Analyte, LabResult] = field(default_factory=dict)
    rejected: tuple[RejectedResult, ...] = ()
    medications: tuple[MedicationEntry, ...] = ()
    conditions: tuple[ConditionEntry, ...] = ()
    draft_fluids: tuple[DraftFluid, ...] = ()
    draft_medications: tuple[DraftMedication, ...] = ()
    draft_unidentified: tuple[DraftUnidentified, ...] = ()
    #: Queries (prefetch keys) of which only the first page of a paged Bundle was read.
    partial_reads: tuple[str, ...] = ()
    #: Units for numbers in card text (institution setting); values stay canonical.
    display_units: DisplayUnits = DisplayUnits.CONVENTIONAL

    def has_condition(self, category: ConditionCategory) -> bool:
        return any(c.category == category for c in self.conditions)
