"""Which findings of one evaluation are shown: the pure decision, no I/O.

The live service and the rehearsal over a Bulk Data export both call :func:`decide`; the
live service reads ``history`` and ``quiets`` from the database, the rehearsal keeps them in
memory, so both apply the same rules. This first version is the interface only: every
finding is shown. Per-finding settings, silent mode and repeat suppression fill it in.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Literal

from cds_service.clinical.findings import Finding

Action = Literal["show", "suppressed", "silent", "off"]


@dataclass(frozen=True, slots=True)
class AlertSettings:
    """The alert-burden part of the configuration (built once, checked when built)."""

    @classmethod
    def default(cls) -> AlertSettings:
        return cls()


@dataclass(frozen=True, slots=True)
class Shown:
    """One earlier card for the same patient (and user, when suppression is per user)."""

    code: str
    indicator: str
    inputs_digest: str
    at: datetime


@dataclass(frozen=True, slots=True)
class Quiet:
    """A clinician's override that quiets a finding for a patient."""

    code: str
    reason: str
    until: datetime | None  # None: until the inputs change
    inputs_digest: str | None  # the inputs the override was given on


@dataclass(frozen=True, slots=True)
class Decision:
    code: str
    indicator: str
    inputs_digest: str
    action: Action
    why: str  # one line, for the card log and audit


def inputs_digest(finding: Finding) -> str:
    """A digest of what a finding rests on: the results it used (by id and value) and its
    values. A new result or a changed number gives a new digest."""
    parts = sorted(f"{i.source_id}={i.value}{i.unit}" for i in finding.inputs)
    parts += sorted(f"{v.name}={v.value}" for v in finding.values)
    return hashlib.sha256("\n".join(parts).encode()).hexdigest()[:32]


def decide(
    findings: Sequence[Finding],
    *,
    service_id: str,
    history: Sequence[Shown],
    quiets: Sequence[Quiet],
    settings: AlertSettings,
    now: datetime,
) -> list[Decision]:
    """One decision per finding, in the order given."""
    del service_id, history, quiets, settings, now
    return [
        Decision(
            code=f.code.value,
            indicator=f.urgency.value,
            inputs_digest=inputs_digest(f),
            action="show",
            why="shown",
        )
        for f in findings
    ]
