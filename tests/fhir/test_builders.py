"""Suggested resources validate as FHIR R4 (fhir.resources R4B models, the reference)."""

from __future__ import annotations

import pytest
from fhir.resources.R4B.servicerequest import ServiceRequest

from cds_service.clinical.context import Analyte
from cds_service.fhir import loinc
from cds_service.fhir.builders import service_request


@pytest.mark.parametrize("analyte", list(Analyte))
def test_service_request_validates_for_every_analyte(analyte: Analyte) -> None:
    sr = service_request(analyte, "lvh-4471", "Hyponatremia work-up: tonicity not yet measured")
    model = ServiceRequest.model_validate(sr)
    assert model.status == "draft" and model.intent == "proposal"
    code, display = loinc.primary_code(analyte)
    assert model.code.coding[0].code == code and model.code.coding[0].display == display
    assert model.subject.reference == "Patient/lvh-4471"
    assert model.reasonCode[0].text.startswith("Hyponatremia")


@pytest.mark.parametrize(("pid", "reason"), [("", "x"), ("p", " ")])
def test_bad_arguments_are_refused(pid: str, reason: str) -> None:
    with pytest.raises(ValueError):
        service_request(Analyte.OSMOLALITY, pid, reason)
