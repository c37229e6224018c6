"""The current chemistry of a hyponatremic patient, computed once per evaluation.

A :class:`Chemistry` holds the current sodium with its severity and acuity, the tonicity call
and the calculated osmolality; the work-up findings read it instead of the raw context.
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical import formulas
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult
from cds_service.clinical.findings import InputUsed, Value, ValueName
from cds_service.clinical.notes import num, used, value
from cds_service.clinical.pathway import TonicityCall, classify
from cds_service.clinical.severity import Acuity, Severity, acuity, severity
from cds_service.clinical.thresholds import Thresholds

V = ValueName


@dataclass(frozen=True, slots=True)
class Chemistry:
    """The current chemistry of a hyponatremic patient, computed once per evaluation."""

    sodium: LabResult
    severity: Severity
    acuity: Acuity
    call: TonicityCall
    calculated_osmolality: float | None
    ctx: ClinicalContext
    th: Thresholds

    def lab(self, analyte: Analyte) -> LabResult | None:
        return self.ctx.current.get(analyte)

    def val(self, analyte: Analyte) -> float | None:
        result = self.ctx.current.get(analyte)
        return None if result is None else result.value

    @property
    def measured_osmolality(self) -> float | None:
        return self.val(Analyte.OSMOLALITY)

    @property
    def osmolal_gap(self) -> float | None:
        m, c = self.measured_osmolality, self.calculated_osmolality
        return None if m is None or c is None else formulas.osmolal_gap(m, c)

    def inputs(self, *analytes: Analyte) -> tuple[InputUsed, ...]:
        labs = [self.sodium, *(self.lab(a) for a in analytes)]
        return tuple(used(r) for r in labs if r is not None)

    def missing(self, *analytes: Analyte) -> tuple[str, ...]:
        return tuple(a.value for a in analytes if a not in self.ctx.current)

    def sodium_values(self) -> list[Value]:
        return [value(V.SERUM_SODIUM, self.sodium.value), Value(V.SEVERITY, self.severity.value)]

    def osmolality_values(self) -> list[Value]:
        out = []
        if self.measured_osmolality is not None:
            out.append(value(V.MEASURED_OSMOLALITY, self.measured_osmolality))
        if self.calculated_osmolality is not None:
            out.append(value(V.CALCULATED_OSMOLALITY, self.calculated_osmolality))
        return out

    def calculated_formula(self) -> tuple[str, ...]:
        glucose, bun = self.val(Analyte.GLUCOSE), self.val(Analyte.UREA_NITROGEN)
        if self.calculated_osmolality is None or glucose is None or bun is None:
            return ()
        return (
            f"Calculated osmolality = 2 × {num(self.sodium.value)} + {num(glucose)}/"
            f"{num(self.th.glucose_mg_dl_per_mmol_l)} + {num(bun)}/"
            f"{num(self.th.urea_nitrogen_mg_dl_per_mmol_l)} = "
            f"{num(self.calculated_osmolality)} mOsm/kg",
        )


def chemistry(ctx: ClinicalContext, th: Thresholds) -> Chemistry | None:
    """The chemistry of a hyponatremic patient; None when sodium is missing or not low."""
    sodium = ctx.current.get(Analyte.SODIUM)
    if sodium is None:
        return None
    sev = severity(sodium.value, th)
    if sev is None:
        return None
    glucose = ctx.current.get(Analyte.GLUCOSE)
    bun = ctx.current.get(Analyte.UREA_NITROGEN)
    osm = ctx.current.get(Analyte.OSMOLALITY)
    calculated = (
        None
        if glucose is None or bun is None
        else formulas.calculated_osmolality(sodium.value, glucose.value, bun.value, th)
    )
    return Chemistry(
        sodium=sodium,
        severity=sev,
        acuity=acuity(ctx.series.get(Analyte.SODIUM, (sodium,)), ctx.now, th),
        call=classify(
            None if osm is None else osm.value, None if glucose is None else glucose.value, th
        ),
        calculated_osmolality=calculated,
        ctx=ctx,
        th=th,
    )
