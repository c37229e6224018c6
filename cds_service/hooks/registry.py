"""The CDS services Tonicity offers and the prefetch templates each declares.

Templates use only widely supported FHIR search parameters (``patient``, ``code`` token lists,
``status``, ``clinical-status``, ``_sort``, ``_count``) so that record systems can fill them.
Sodium results have their own key, apart from the other chemistry, because the sodium series
feeds the correction-rate surveillance and needs more history.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

from cds_service.clinical.context import Analyte
from cds_service.hooks.models import ServiceDescription, prune

PATIENT = "{{context.patientId}}"
LOINC_SYSTEM = "http://loinc.org"

#: Prefetch keys whose data the services cannot work without (412 when unavailable).
REQUIRED_KEYS: tuple[str, ...] = ("patient", "sodium")

#: Analytes fetched under the ``labs`` key (everything but sodium).
LAB_ANALYTES: tuple[Analyte, ...] = tuple(a for a in Analyte if a is not Analyte.SODIUM)

SODIUM_COUNT = 100
LABS_COUNT = 200


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
    "vital signs), MedicationRequest, MedicationStatement and Condition. Decision support for "
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
    return {
        "patient": f"Patient/{PATIENT}",
        "sodium": (
            f"Observation?patient={PATIENT}&code={_code_tokens(Analyte.SODIUM)}"
            f"&_sort=-date&_count={SODIUM_COUNT}"
        ),
        "labs": (
            f"Observation?patient={PATIENT}&code={_code_tokens(*LAB_ANALYTES)}"
            f"&_sort=-date&_count={LABS_COUNT}"
        ),
        "medicationRequests": f"MedicationRequest?patient={PATIENT}&status=active",
        "medicationStatements": f"MedicationStatement?patient={PATIENT}",
        "conditions": f"Condition?patient={PATIENT}&clinical-status=active",
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
