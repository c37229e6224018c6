"""The CDS services Tonicity offers and the prefetch templates each declares.

Templates use only widely supported FHIR search parameters (``patient``, ``code`` token lists,
``status``, ``clinical-status``, ``_sort``, ``_count``) so that record systems can fill them.
The patient is named in the typed reference form (``patient=Patient/{id}``): FHIR R4 search
("reference" parameters) lets a server require the type, and every conformant server accepts
the typed form, while some (Medplum, in the test suite) find nothing with a bare id.

Sodium results have their own key, apart from the other chemistry, because the sodium series
feeds the correction-rate surveillance and needs more history. The other results are split
by how often they are measured: one ``_sort=-date&_count=N`` page of every laboratory code
together is filled by the frequent ones (bedside glucose every hour, daily weights) and can
leave out the one urine osmolality or TSH the work-up turns on. Each rare group has its own
query and page (:data:`LAB_GROUPS`), and discovery says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

from cds_service.clinical.context import Analyte
from cds_service.hooks.models import ServiceDescription, prune

PATIENT = "{{context.patientId}}"
LOINC_SYSTEM = "http://loinc.org"

#: Prefetch keys whose data the services cannot work without (412 when unavailable). A
#: missing Patient is not among them: the cards then say that age and sex were not checked.
REQUIRED_KEYS: tuple[str, ...] = ("sodium",)

SODIUM_COUNT = 100


@dataclass(frozen=True, slots=True)
class LabGroup:
    """One Observation prefetch query: its analytes, page size and what it is for."""

    analytes: tuple[Analyte, ...]
    count: int
    name: str  # readable, for "not available" and "first page only" notes


#: The laboratory and body-measurement queries besides sodium, frequent results first.
LAB_GROUPS: dict[str, LabGroup] = {
    "labs": LabGroup(
        (
            Analyte.GLUCOSE,
            Analyte.UREA_NITROGEN,
            Analyte.CREATININE,
            Analyte.POTASSIUM,
            Analyte.EGFR,
        ),
        200,
        "glucose, urea, creatinine and potassium",
    ),
    "osmolality": LabGroup((Analyte.OSMOLALITY,), 20, "measured serum osmolality"),
    "urineStudies": LabGroup(
        (
            Analyte.URINE_OSMOLALITY,
            Analyte.URINE_SODIUM,
            Analyte.URINE_POTASSIUM,
            Analyte.URINE_CREATININE,
            Analyte.URINE_UREA_NITROGEN,
            Analyte.URINE_URIC_ACID,
            Analyte.URINE_VOLUME_24H,
        ),
        50,
        "urine studies",
    ),
    "endocrine": LabGroup(
        (Analyte.TSH, Analyte.FREE_T4, Analyte.CORTISOL), 20, "thyroid and adrenal tests"
    ),
    "solutes": LabGroup(
        (Analyte.TRIGLYCERIDES, Analyte.TOTAL_PROTEIN, Analyte.URIC_ACID, Analyte.ETHANOL),
        20,
        "lipids, protein, uric acid and ethanol",
    ),
    "bodySize": LabGroup((Analyte.BODY_WEIGHT, Analyte.BODY_HEIGHT), 10, "weight and height"),
}


@dataclass(frozen=True, slots=True)
class Service:
    id: str
    hook: str
    title: str
    description: str
    usage: str
    #: Context keys the hook must carry.
    required_context: tuple[str, ...]

    def describe(self) -> ServiceDescription:
        return ServiceDescription(
            hook=self.hook,
            title=self.title,
            description=self.description,
            id=self.id,
            prefetch=prefetch_templates(),
            usageRequirements=self.usage,
        )


_USAGE = (
    "Adults (18 years and over). Needs read access to Patient, Observation (laboratory and "
    "vital signs), MedicationRequest, MedicationStatement and Condition. Laboratory results "
    "are asked in separate prefetch queries (sodium; labs for glucose, urea, creatinine and "
    "potassium; osmolality; urineStudies; endocrine; solutes; bodySize), each with its own "
    "page size, so that frequent results such as bedside glucose or daily weights cannot fill "
    "the page that a rare urine study or thyroid test needs. Decision support for "
    "licensed clinicians; every card must be checked against the patient and local protocols."
)

SERVICES: dict[str, Service] = {
    s.id: s
    for s in (
        Service(
            id="sodium-workup",
            hook="patient-view",
            title="Tonicity: hyponatremia work-up",
            description=(
                "When a chart is opened, interprets the serum sodium with osmolality, urine "
                "studies, glucose, medications and problems: tonicity pathway, SIADH criteria, "
                "endocrine screen, drug causes, osmolal gap and correction-rate surveillance."
            ),
            usage=_USAGE,
            required_context=("patientId",),
        ),
        Service(
            id="sodium-order-select",
            hook="order-select",
            title="Tonicity: sodium order safety (selection)",
            description=(
                "While orders are selected, checks IV fluids, hypertonic saline, drugs that lower "
                "sodium and vasopressin-receptor antagonists against the patient's sodium, with "
                "the expected change per liter (Adrogue-Madias)."
            ),
            usage=_USAGE,
            required_context=("patientId", "draftOrders", "selections"),
        ),
        Service(
            id="sodium-order-sign",
            hook="order-sign",
            title="Tonicity: sodium order safety (signing)",
            description=(
                "Before orders are signed, checks every drafted IV fluid, hypertonic saline, drug "
                "that lowers sodium and vasopressin-receptor antagonist against the patient's "
                "sodium, with the expected change per liter (Adrogue-Madias)."
            ),
            usage=_USAGE,
            required_context=("patientId", "draftOrders"),
        ),
    )
}


def _code_tokens(*analytes: Analyte) -> str:
    from cds_service.fhir.loinc import codes_for

    return ",".join(f"{LOINC_SYSTEM}|{code}" for code in codes_for(*analytes))


def prefetch_templates() -> dict[str, str]:
    """The prefetch templates shared by the three services (key -> FHIR query); a copy."""
    return dict(_templates())


@cache
def _templates() -> dict[str, str]:
    def observations(analytes: tuple[Analyte, ...], count: int) -> str:
        return (
            f"Observation?patient=Patient/{PATIENT}&code={_code_tokens(*analytes)}"
            f"&_sort=-date&_count={count}"
        )

    return {
        "patient": f"Patient/{PATIENT}",
        "sodium": observations((Analyte.SODIUM,), SODIUM_COUNT),
        **{key: observations(g.analytes, g.count) for key, g in LAB_GROUPS.items()},
        "medicationRequests": f"MedicationRequest?patient=Patient/{PATIENT}&status=active",
        "medicationStatements": f"MedicationStatement?patient=Patient/{PATIENT}",
        "conditions": f"Condition?patient=Patient/{PATIENT}&clinical-status=active",
    }


def discovery() -> dict[str, object]:
    """The body of ``GET /cds-services``."""
    return {
        "services": [prune(s.describe().model_dump(exclude_none=True)) for s in SERVICES.values()]
    }


def fill(template: str, context: dict[str, object]) -> str:
    """Replace the ``{{context.X}}`` tokens of a template with values from the hook context."""
    out = template
    for key, value in context.items():
        if isinstance(value, str):
            out = out.replace("{{context." + key + "}}", value)
    return out
