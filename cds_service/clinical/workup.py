"""Patient-view work-up: assembles the findings for a patient whose current sodium is low.

Rules follow the table of finding codes in DESIGN.md: one tonicity finding, the osmolal gap,
the urine findings of the hypotonic branch, drugs, and the endocrine screen.
"""

from __future__ import annotations

from cds_service.clinical.chemistry import Chemistry, chemistry
from cds_service.clinical.context import Analyte, ClinicalContext
from cds_service.clinical.drugs import DrugRole, active_matches
from cds_service.clinical.findings import Finding, FindingCode, InputUsed, Urgency, ValueName
from cds_service.clinical.hypotonic import random_cortisol_line
from cds_service.clinical.notes import CAUTION, num, shorten, unique, used, value
from cds_service.clinical.pathway import Tonicity
from cds_service.clinical.thresholds import Thresholds
from cds_service.clinical.tonicity import osmolal_gap_finding, tonicity_finding
from cds_service.clinical.urine import dilute_urine_finding, low_urine_sodium_finding, siadh_finding

V = ValueName


# --- Drugs and endocrine screen -----------------------------------------------------------------


def drug_associated_finding(c: Chemistry) -> Finding | None:
    matches = active_matches(c.ctx, DrugRole.ASSOCIATED)
    if not matches:
        return None
    names = list(unique([m.name for m in matches]))
    head = f"Active medications associated with hyponatremia (sodium {num(c.sodium.value)}): "
    summary = head + ", ".join(names)
    if len(summary) >= 140:
        summary = shorten(head + ", ".join(names), 120) + f" ({len(names)} drugs)"
    return Finding(
        code=FindingCode.DRUG_ASSOCIATED,
        urgency=Urgency.INFO,
        summary=summary,
        details=tuple(
            f"- **{m.name}** ({m.drug_class.label}; {m.source_id}): {m.drug_class.mechanism}"
            for m in matches
        ),
        values=(value(V.SERUM_SODIUM, c.sodium.value),),
        inputs=(
            used(c.sodium),
            *(
                InputUsed(label="Medication", value=m.display, unit="", source_id=m.source_id)
                for m in matches
            ),
        ),
        sources=unique([m.drug_class.citation for m in matches]),
        next_steps=("Review whether each drug is still needed; stop or replace it where safe.",),
        cautions=(CAUTION,),
    )


def _endocrine_gaps(c: Chemistry) -> list[tuple[str, str, str]]:
    """(analyte, test name, what stays open) for each endocrine test still needed."""
    th = c.th
    gaps = []
    tsh = c.val(Analyte.TSH)
    if tsh is None:
        gaps.append(("tsh", "TSH", "hypothyroidism"))
    elif tsh > th.tsh_upper_normal and c.val(Analyte.FREE_T4) is None:
        gaps.append(("free_t4", "free T4", "overt hypothyroidism (TSH is raised)"))
    if c.lab(Analyte.CORTISOL) is None:
        gaps.append(("cortisol", "morning cortisol", "adrenal insufficiency"))
    return gaps


def endocrine_finding(c: Chemistry) -> Finding | None:
    gaps = _endocrine_gaps(c)
    if not gaps:
        return None
    tests = " and ".join(name for _, name, _ in gaps)
    open_ = " and ".join(what for _, _, what in gaps)
    verb = "are" if len(gaps) > 1 else "is"
    details = [
        "Hypothyroidism and adrenal insufficiency must be excluded before SIADH can be "
        "diagnosed (Schwartz & Bartter 1957; 2014 European guideline); only overt "
        "hypothyroidism (raised TSH with low free T4) excludes it on thyroid grounds.",
    ]
    random = random_cortisol_line(c)
    if random:
        details.append(random)
    return Finding(
        code=FindingCode.ENDOCRINE_SCREEN,
        urgency=Urgency.INFO,
        summary=shorten(
            f"Hypotonic hyponatremia: {tests} {verb} still needed; {open_} not yet excluded", 139
        ),
        details=tuple(details),
        values=(value(V.SERUM_SODIUM, c.sodium.value),),
        inputs=c.inputs(Analyte.TSH, Analyte.FREE_T4, Analyte.CORTISOL),
        sources=(
            c.th.cite("tonicity_hypotonic_below"),
            c.th.cite("tsh_upper_normal"),
            c.th.cite("cortisol_morning_from_hour"),
        ),
        missing=tuple(dict.fromkeys(a for a, _, _ in gaps)),
        next_steps=(f"Order {tests}.",),
        cautions=(CAUTION,),
    )


def workup_findings(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """Patient-view findings for a low current sodium; [] when sodium is normal or missing."""
    c = chemistry(ctx, th)
    if c is None:
        return []
    found: list[Finding | None] = [tonicity_finding(c), osmolal_gap_finding(c)]
    if c.call.tonicity is Tonicity.HYPOTONIC:
        found += [dilute_urine_finding(c), low_urine_sodium_finding(c), siadh_finding(c)]
    found.append(drug_associated_finding(c))
    if c.call.tonicity is Tonicity.HYPOTONIC:
        found.append(endocrine_finding(c))
    return [f for f in found if f is not None]
