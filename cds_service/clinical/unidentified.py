"""Draft orders Tonicity could not identify while sodium is low: said, never passed over.

The FHIR layer puts into ``ctx.draft_unidentified`` every draft that looks like an IV fluid
whose make-up it could not read, and every drug coded only in a code system it does not read
(``DraftUnidentified``). While serum sodium is below the lower limit of normal each selected
one is shown, with what was sent, because an unknown fluid may be hypotonic and an unknown
drug may be one that lowers sodium.
"""

from __future__ import annotations

from cds_service.clinical.context import Analyte, ClinicalContext, DraftUnidentified
from cds_service.clinical.findings import Finding, FindingCode, Urgency, ValueName
from cds_service.clinical.notes import CAUTION, qty, shorten, unique, used, value
from cds_service.clinical.thresholds import Thresholds


def _line(d: DraftUnidentified) -> str:
    codes = f"; codes sent: {', '.join(d.codes)}" if d.codes else ""
    return f"- {d.kind}: **{d.display}** ({d.resource_id}): {d.reason}{codes}"


def unidentified_findings(ctx: ClinicalContext, th: Thresholds) -> list[Finding]:
    """[] or one UNIDENTIFIED_ORDER finding for the selected unidentified drafts."""
    drafts = [d for d in ctx.draft_unidentified if d.selected]
    sodium = ctx.current.get(Analyte.SODIUM)
    if not drafts or sodium is None or sodium.value >= th.sodium_lower_normal:
        return []
    first = drafts[0]
    fluid = any(d.kind == "fluid" for d in drafts)
    what = "IV fluid" if first.kind == "fluid" else "drug"
    na = qty(sodium.value, Analyte.SODIUM, ctx.display_units)
    check = "check what it contains" if first.kind == "fluid" else "check whether it lowers sodium"
    summary = shorten(
        f"Drafted {what} not identified: '{shorten(first.display, 50)}' (sodium {na}); {check}",
        139,
    )
    steps = []
    if fluid:
        steps.append(
            "Before signing, check the fluid's sodium and potassium content (or choose the "
            "coded fluid from the formulary): a hypotonic fluid lowers sodium further."
        )
    if any(d.kind == "drug" for d in drafts):
        steps.append(
            "Check whether the drug is one associated with hyponatremia; Tonicity could not "
            "tell from the code that was sent."
        )
    return [
        Finding(
            code=FindingCode.UNIDENTIFIED_ORDER,
            urgency=Urgency.WARNING if fluid else Urgency.INFO,
            summary=summary,
            details=(
                "Tonicity could not identify these drafted orders, so it could not check them:",
                *(_line(d) for d in drafts),
            ),
            values=(value(ValueName.SERUM_SODIUM, sodium.value),),
            inputs=(used(sodium),),
            sources=unique([th.cite("sodium_lower_normal"), th.cite("infusate_hypotonic_below")]),
            next_steps=tuple(steps),
            cautions=(CAUTION,),
        )
    ]
