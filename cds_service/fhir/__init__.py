"""FHIR R4 -> clinical inputs: LOINC map, UCUM units, lab timeline, medications, problems,
patient, draft orders; builders for suggested resources.

Public surface: :func:`build_context`, :class:`Ingested`, :class:`IngestReport`,
:class:`ReportLine`; ``cds_service.fhir.loinc.codes_for`` / ``primary_code``;
``cds_service.fhir.builders.service_request``.
"""

from cds_service.fhir.ingest import Ingested, build_context
from cds_service.fhir.report import IngestReport, ReportLine

__all__ = ["IngestReport", "Ingested", "ReportLine", "build_context"]
