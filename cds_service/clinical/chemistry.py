"""The current chemistry of a hyponatremic patient, computed once per evaluation.

A :class:`Chemistry` holds the current sodium with its severity and acuity, the glucose-corrected
sodium and its severity, the tonicity call (by effective osmolality), the calculated osmolality
and the eGFR; the work-up findings read it instead of the raw context.
"""

from __future__ import annotations

from dataclasses import dataclass

from cds_service.clinical import formulas
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult, Sex
from cds_service.clinical.findings import InputUsed, Value, ValueName
from cds_service.clinical.notes import num, qty, used, value
from cds_service.clinical.pathway import TonicityCall, classify
from cds_service.clinical.severity import SEVERITY_RANK, Acuity, Severity, acuity, severity
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
    #: Glucose-corrected sodium (Katz 1973, Hillier 1999) when glucose is above the reference.
    corrected_katz: float | None = None
    corrected_hillier: float | None = None
    #: eGFR used for the renal criterion: reported by the laboratory or CKD-EPI 2021.
    egfr: float | None = None
    egfr_note: str = ""

    @property
    def translocational(self) -> bool:
        """Hyperglycemia draws water out of cells: the measured sodium overstates the deficit."""
        return self.call.hyperglycemia and self.corrected_hillier is not None

    @property
    def corrected_severity(self) -> Severity | None:
        """Severity of the glucose-corrected sodium (Hillier); None when it is not low."""
        if self.corrected_hillier is None:
            return None
        return severity(self.corrected_hillier, self.th)

    @property
    def alarm_severity(self) -> Severity | None:
        """The severity that drives wording and the profound-sodium alarm: the corrected one
        when the low sodium is translocational, otherwise the measured one."""
        return self.corrected_severity if self.translocational else self.severity

    @property
    def profound(self) -> bool:
        sev = self.alarm_severity
        return sev is not None and SEVERITY_RANK[sev] == SEVERITY_RANK[Severity.PROFOUND]

    @property
    def urea_osmoles(self) -> float | None:
        bun = self.val(Analyte.UREA_NITROGEN)
        return None if bun is None else formulas.urea_osmoles(bun, self.th)

    @property
    def ethanol_osmoles(self) -> float | None:
        ethanol = self.val(Analyte.ETHANOL)
        return None if ethanol is None else formulas.ethanol_osmoles(ethanol, self.th)

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
        out = [value(V.SERUM_SODIUM, self.sodium.value), Value(V.SEVERITY, self.severity.value)]
        if self.translocational:
            corrected = self.corrected_severity
            out.append(Value(V.CORRECTED_SEVERITY, corrected.value if corrected else "normal"))
        return out

    def corrected_values(self) -> list[Value]:
        if self.corrected_katz is None or self.corrected_hillier is None:
            return []
        return [
            value(V.CORRECTED_SODIUM_KATZ, self.corrected_katz),
            value(V.CORRECTED_SODIUM_HILLIER, self.corrected_hillier),
        ]

    def osmolality_values(self) -> list[Value]:
        out = []
        if self.measured_osmolality is not None:
            out.append(value(V.MEASURED_OSMOLALITY, self.measured_osmolality))
        if self.calculated_osmolality is not None:
            out.append(value(V.CALCULATED_OSMOLALITY, self.calculated_osmolality))
        effective = self.call.effective_osmolality
        if effective is not None and self.set_aside():
            out.append(value(V.EFFECTIVE_OSMOLALITY, effective))
        ethanol = self.val(Analyte.ETHANOL)
        if ethanol is not None:
            out.append(value(V.ETHANOL, ethanol))
        return out

    def set_aside(self) -> list[str]:
        """The ineffective osmoles taken out of the measured osmolality, as card text."""
        out = []
        bun, ethanol = self.val(Analyte.UREA_NITROGEN), self.val(Analyte.ETHANOL)
        disp = self.ctx.display_units
        if bun is not None and self.urea_osmoles is not None:
            out.append(
                f"urea (urea nitrogen {qty(bun, Analyte.UREA_NITROGEN, disp)} / "
                f"{num(self.th.urea_nitrogen_mg_dl_per_mmol_l)} = {num(self.urea_osmoles)} mOsm/kg)"
            )
        if ethanol is not None and self.ethanol_osmoles is not None:
            out.append(
                f"ethanol ({qty(ethanol, Analyte.ETHANOL, disp)} / "
                f"{num(self.th.ethanol_mg_dl_per_mmol_l)} = {num(self.ethanol_osmoles)} mOsm/kg)"
            )
        return out

    def calculated_formula(self) -> tuple[str, ...]:
        glucose, bun = self.val(Analyte.GLUCOSE), self.val(Analyte.UREA_NITROGEN)
        if self.calculated_osmolality is None or glucose is None or bun is None:
            return ()
        ethanol = self.val(Analyte.ETHANOL)
        ethanol_term = (
            "" if ethanol is None else f" + {num(ethanol)}/{num(self.th.ethanol_mg_dl_per_mmol_l)}"
        )
        return (
            f"Calculated osmolality = 2 × {num(self.sodium.value)} + {num(glucose)}/"
            f"{num(self.th.glucose_mg_dl_per_mmol_l)} + {num(bun)}/"
            f"{num(self.th.urea_nitrogen_mg_dl_per_mmol_l)}{ethanol_term} = "
            f"{num(self.calculated_osmolality)} mOsm/kg",
        )

    def effective_formula(self) -> tuple[str, ...]:
        measured, effective = self.measured_osmolality, self.call.effective_osmolality
        if measured is None or effective is None or not self.set_aside():
            return ()
        parts = [p for p in (self.urea_osmoles, self.ethanol_osmoles) if p is not None]
        minus = " − ".join(num(p) for p in parts)
        return (f"Effective osmolality = {num(measured)} − {minus} = {num(effective)} mOsm/kg",)


def chemistry(ctx: ClinicalContext, th: Thresholds) -> Chemistry | None:
    """The chemistry of a hyponatremic patient; None when sodium is missing or not low."""
    sodium = ctx.current.get(Analyte.SODIUM)
    if sodium is None:
        return None
    sev = severity(sodium.value, th)
    if sev is None:
        return None
    value_of = {a: r.value for a, r in ctx.current.items()}
    glucose = value_of.get(Analyte.GLUCOSE)
    bun = value_of.get(Analyte.UREA_NITROGEN)
    ethanol = value_of.get(Analyte.ETHANOL)
    calculated = (
        None
        if glucose is None or bun is None
        else formulas.calculated_osmolality(sodium.value, glucose, bun, th, ethanol or 0.0)
    )
    katz = hillier = None
    if glucose is not None and glucose > th.glucose_reference:
        katz = formulas.corrected_sodium_katz(sodium.value, glucose, th)
        hillier = formulas.corrected_sodium_hillier(sodium.value, glucose, th)
    egfr, egfr_note = _egfr(ctx, th)
    return Chemistry(
        sodium=sodium,
        severity=sev,
        acuity=acuity(ctx.series.get(Analyte.SODIUM, (sodium,)), ctx.now, th),
        call=classify(
            value_of.get(Analyte.OSMOLALITY),
            glucose,
            th,
            urea_nitrogen_mg_dl=bun,
            ethanol_mg_dl=ethanol,
            corrected_sodium=hillier,
        ),
        calculated_osmolality=calculated,
        ctx=ctx,
        th=th,
        corrected_katz=katz,
        corrected_hillier=hillier,
        egfr=egfr,
        egfr_note=egfr_note,
    )


def _egfr(ctx: ClinicalContext, th: Thresholds) -> tuple[float | None, str]:
    """The eGFR for the renal criterion, and how it was had (card text)."""
    reported = ctx.current.get(Analyte.EGFR)
    if reported is not None:
        return reported.value, "reported by the laboratory"
    creatinine = ctx.current.get(Analyte.CREATININE)
    if creatinine is None:
        return None, "creatinine not measured"
    patient = ctx.patient
    if not patient.known or patient.age_years is None or patient.sex is Sex.UNKNOWN:
        return None, "eGFR could not be computed: the CKD-EPI 2021 equation needs age and sex"
    if creatinine.value <= 0 or patient.age_years <= 0:
        return None, "eGFR could not be computed from these values"
    female = patient.sex is Sex.FEMALE
    egfr = formulas.egfr_ckd_epi_2021(creatinine.value, patient.age_years, female, th)
    shown = qty(creatinine.value, Analyte.CREATININE, ctx.display_units)
    sex = "female" if female else "male"
    return egfr, f"CKD-EPI 2021 from creatinine {shown}, age {num(patient.age_years, 0)}, {sex}"
