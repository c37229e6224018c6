"""Render a clinical :class:`Finding` as a CDS Hooks card.

The detail is GitHub-flavoured markdown a clinician can check independently: the finding, the
numbers with their inputs (value, unit, when taken and how old), the formulas, the published
sources, the missing tests and next steps, the cautions, and always the caution line.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from typing import Any

from cds_service.clinical.context import Analyte
from cds_service.clinical.findings import FINDING_DISPLAY, Finding, FindingCode, Urgency
from cds_service.fhir.builders import OrderContext, service_request
from cds_service.fhir.loinc import order_name
from cds_service.hooks.models import Action, Card, Coding, Link, Source, Suggestion

SOURCE_LABEL = "Tonicity"
TOPIC_SYSTEM = "https://tonicity.example.org/finding"
OVERRIDE_SYSTEM = "https://tonicity.example.org/override-reason"
CAUTION = (
    "Decision support for licensed clinicians: check against the patient and local protocols; "
    "this is not an order and does not replace clinical judgement."
)

#: Override reasons offered on warning and critical cards (codes of our own).
OVERRIDE_REASONS: tuple[tuple[str, str], ...] = (
    ("already-addressed", "Already addressed"),
    ("patient-specific-target", "Patient-specific target agreed"),
    ("benefit-outweighs-risk", "Benefit outweighs the risk for this patient"),
    ("data-not-current", "Data not current or not representative"),
    ("other", "Other reason"),
)

VALUES_EXTENSION = "tonicity.values"

#: Said first on every card when no readable Patient was had (PatientFacts.known False).
PATIENT_NOT_CHECKED = (
    "**Age and sex could not be checked**: no readable Patient record was available. Confirm "
    "that the patient is an adult (18 years or over) before using this card; numbers that "
    "depend on age or sex (total body water, sex-specific limits) are qualified below."
)

#: Finding codes whose cards rest on the medication queries (prefetch keys below).
_MEDICATION_CODES = frozenset(
    {
        FindingCode.DRUG_ASSOCIATED,
        FindingCode.SIADH_PATTERN,
        FindingCode.DRUG_ORDER_RISK,
        FindingCode.VAPTAN_ORDER,
    }
)
_MEDICATION_KEYS = frozenset({"medicationRequests", "medicationStatements"})
#: Codes that no problem-list entry changes.
_NOT_CONDITIONS = frozenset(
    {FindingCode.DRUG_ASSOCIATED, FindingCode.IMPLAUSIBLE, FindingCode.OUT_OF_SCOPE}
)


def rests_on(code: FindingCode, key: str) -> bool:
    """Could the data of prefetch ``key`` change the card of ``code``? Sodium, the patient and
    the laboratory queries feed every card; medications and problems only some."""
    if key in _MEDICATION_KEYS:
        return code in _MEDICATION_CODES
    if key == "conditions":
        return code not in _NOT_CONDITIONS
    return True


def _age(then: datetime, now: datetime) -> str:
    seconds = (now - then).total_seconds()
    if seconds < 0:
        return "in the future relative to the evaluation time"
    minutes = seconds / 60
    if minutes < 90:
        return f"{minutes:.0f} min ago"
    hours = minutes / 60
    if hours < 48:
        return f"{hours:.0f} h ago"
    return f"{hours / 24:.1f} days ago"


def _number(value: float | str) -> str:
    if isinstance(value, float):
        return f"{value:.3g}" if abs(value) < 10 else f"{value:.1f}".rstrip("0").rstrip(".")
    return str(value)


def _label(name: str) -> str:
    """``serum_sodium`` -> ``Serum sodium`` for the detail table."""
    return name.replace("_", " ").capitalize()


def _section(title: str, lines: Iterable[str]) -> list[str]:
    items = [line for line in lines if line]
    return [f"**{title}**", "", *(f"- {line}" for line in items), ""] if items else []


def _test_name(analyte: str) -> str:
    try:
        return order_name(Analyte(analyte))
    except ValueError:
        return analyte.replace("_", " ")


def render_detail(
    finding: Finding,
    now: datetime,
    unavailable: Iterable[str] = (),
    *,
    partial: Iterable[str] = (),
    patient_known: bool = True,
) -> str:
    """The card detail in markdown; ``partial``: what was read only in part (first page of a
    paged search), ``patient_known`` False: no readable Patient (said first)."""
    out: list[str] = [f"**{FINDING_DISPLAY[finding.code]}**", ""]
    if not patient_known:
        out += [PATIENT_NOT_CHECKED, ""]
    for paragraph in finding.details:  # one paragraph each (markdown joins adjacent lines)
        out += [paragraph, ""]
    if finding.values:
        out += ["| Value | Result | Unit |", "|---|---|---|"]
        out += [
            f"| {_label(v.name)} | {_number(v.value)} | {'' if v.unit == '1' else v.unit} |"
            for v in finding.values
        ]
        out.append("")
    inputs = []
    for i in finding.inputs:
        when = (
            f", taken {i.time.astimezone(UTC):%Y-%m-%d %H:%M} UTC ({_age(i.time, now)})"
            if i.time
            else ""
        )
        ref = f" [{i.source_id}]" if i.source_id else ""
        note = f" ({i.note})" if i.note else ""
        inputs.append(f"{i.label}: {_number(i.value)} {i.unit}{when}{note}{ref}")
    out += _section("Inputs", inputs)
    out += _section("Formulas", (f"`{f}`" for f in finding.formulas))
    out += _section("Sources", finding.sources)
    out += _section("Missing tests", (_test_name(a) for a in finding.missing))
    out += _section("Next steps", finding.next_steps)
    out += _section("Not available", unavailable)
    out += _section(
        "Read in part (only the first page of results; older ones may be missing)", partial
    )
    out += _section("Cautions", (c for c in finding.cautions if not _is_caution_line(c)))
    out.append(f"> {CAUTION}")
    return "\n".join(out)


def _is_caution_line(text: str) -> bool:
    """The clinical core may repeat the standing caution; it is written once, last."""
    return text.lower().startswith("decision support for licensed clinicians")


def suggested_tests(findings: Sequence[Finding]) -> list[tuple[str, ...]]:
    """Per finding, the missing tests its card offers as orders: each test once per response,
    on the finding that names the fewest missing tests (the one most specific to it; the first
    of equals), so a clinician never drafts the same order twice from two cards. Every card's
    detail still lists all that its finding misses."""
    owner: dict[str, int] = {}
    for i, f in enumerate(findings):
        for analyte in f.missing:
            j = owner.get(analyte)
            if j is None or len(f.missing) < len(findings[j].missing):
                owner[analyte] = i
    return [tuple(a for a in f.missing if owner[a] == i) for i, f in enumerate(findings)]


def _suggestions(finding: Finding, order: OrderContext, tests: Iterable[str]) -> list[Suggestion]:
    """One suggestion per offered test; with two or more, the test the finding names first
    (the clinical core lists missing tests in the order its pathway asks for them) is marked
    ``isRecommended`` as the usual next step (CDS Hooks 2.0.1, Suggestion)."""
    reason = f"Hyponatremia work-up: {FINDING_DISPLAY[finding.code]}"
    offered = list(dict.fromkeys(tests))
    first = finding.missing[0] if finding.missing else None
    recommend = first if len(offered) > 1 and first in offered else None
    out: list[Suggestion] = []
    for analyte in offered:
        name = _test_name(analyte)
        resource = service_request(Analyte(analyte), order, reason)
        out.append(
            Suggestion(
                label=f"Order {name}"[:80],
                uuid=str(uuid.uuid4()),
                isRecommended=True if analyte == recommend else None,
                actions=[
                    Action(type="create", description=f"Draft order for {name}", resource=resource)
                ],
            )
        )
    if finding.remove_draft:
        out.append(
            Suggestion(
                label="Remove the drafted order",
                uuid=str(uuid.uuid4()),
                actions=[
                    Action(
                        type="delete",
                        description=f"Remove the draft {finding.remove_draft}",
                        resourceId=finding.remove_draft,
                    )
                ],
            )
        )
    return out


def values_extension(finding: Finding) -> dict[str, Any] | None:
    if not finding.values:
        return None
    return {
        VALUES_EXTENSION: [
            {"name": str(v.name), "value": v.value, "unit": v.unit} for v in finding.values
        ]
    }


def render_card(
    finding: Finding,
    *,
    now: datetime,
    patient_id: str,
    unavailable: Iterable[str] = (),
    links: Iterable[Link] = (),
    tests: Iterable[str] | None = None,
    partial: Iterable[str] = (),
    patient_known: bool = True,
    source_url: str | None = None,
    order_context: OrderContext | None = None,
) -> Card:
    """The card of ``finding``; ``tests`` are the missing tests it offers as orders (default:
    all of ``finding.missing``; see :func:`suggested_tests` for a whole response);
    ``source_url`` the service's page explaining the finding (``/findings/{code}``)."""
    suggestions = _suggestions(
        finding,
        order_context or OrderContext(patient_id=patient_id, authored_on=now),
        finding.missing if tests is None else tests,
    )
    weighty = finding.urgency in (Urgency.WARNING, Urgency.CRITICAL)
    return Card(
        uuid=str(uuid.uuid4()),
        summary=finding.summary,
        detail=render_detail(
            finding, now, unavailable, partial=partial, patient_known=patient_known
        ),
        indicator=finding.urgency.value,
        source=Source(
            label=SOURCE_LABEL,
            url=source_url,
            topic=Coding(
                system=TOPIC_SYSTEM, code=finding.code.value, display=FINDING_DISPLAY[finding.code]
            ),
        ),
        suggestions=suggestions,
        selectionBehavior="any" if suggestions else None,
        overrideReasons=(
            [Coding(system=OVERRIDE_SYSTEM, code=c, display=d) for c, d in OVERRIDE_REASONS]
            if weighty
            else []
        ),
        links=list(links),
        extension=values_extension(finding),
    )


def with_quieting_reasons(card: Card, reasons: Iterable[tuple[str, str]]) -> Card:
    """The card with the alert policy's override reasons (``cds_service/alerts``: each one's
    display says what choosing it hides, and for how long) before the card's own."""
    extra = [Coding(system=OVERRIDE_SYSTEM, code=c, display=d) for c, d in reasons]
    if not extra:
        return card
    return card.model_copy(update={"overrideReasons": [*extra, *card.overrideReasons]})


_RANK = {Urgency.CRITICAL: 0, Urgency.WARNING: 1, Urgency.INFO: 2}


def one_per_code(findings: Iterable[Finding]) -> list[Finding]:
    """At most one finding per code (the weightiest), most urgent first, order kept otherwise."""
    best: dict[FindingCode, Finding] = {}
    for f in findings:
        kept = best.get(f.code)
        if kept is None or _RANK[f.urgency] < _RANK[kept.urgency]:
            best[f.code] = f
    return sorted(best.values(), key=lambda f: _RANK[f.urgency])
