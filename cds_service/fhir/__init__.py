"""FHIR R4 -> clinical inputs: LOINC map, UCUM units, lab timeline, medications, problems,
patient, draft orders; builders for suggested resources.

Public surface: :func:`build_context`, :class:`Ingested`, :class:`IngestReport`,
:class:`ReportLine`; ``cds_service.fhir.loinc.codes_for`` / ``primary_code``;
``cds_service.fhir.builders.service_request``.
"""

from cds_service.fhir.ingest import Ingested, build_context
from cds_service.fhir.report import IngestReport, ReportLine

__all__ = ["IngestReport", "Ingested", "ReportLine", "build_context", "warm_up"]


def warm_up() -> None:
    """Load the unit registry, data files and R4B models now (about a second, once per
    process) so the first request does not pay for it."""
    from cds_service.fhir import conditions, loinc, units, validate

    units.registry()
    loinc.entries()
    conditions.categorise("", "")
    for resource_type in validate.RESOURCE_TYPES:
        validate.model_for(resource_type)
