"""What the FHIR layer understood of each resource: used, or ignored and why."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from datetime import datetime
from typing import Any


@dataclass(frozen=True, slots=True)
class ReportLine:
    resource: str  # "Observation/abc" (or "Observation/#3" when the resource had no id)
    understood_as: str  # "sodium (LOINC 2951-2)", "medication: furosemide", "not read" ...
    used: bool
    reason: str = ""  # why ignored, or a note on a used resource ("preliminary")
    analyte: str | None = None
    value: float | None = None  # in the canonical unit
    unit: str | None = None
    raw: str | None = None  # value and unit as sent
    time: datetime | None = None

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["time"] = self.time.isoformat() if self.time else None
        return out


@dataclass(frozen=True, slots=True)
class IngestReport:
    lines: tuple[ReportLine, ...] = ()

    def used(self) -> list[ReportLine]:
        return [line for line in self.lines if line.used]

    def ignored(self) -> list[ReportLine]:
        return [line for line in self.lines if not line.used]

    def to_dict(self) -> dict[str, Any]:
        return {
            "resources": [line.to_dict() for line in self.lines],
            "used": len(self.used()),
            "ignored": len(self.ignored()),
        }


@dataclass(slots=True)
class ReportBuilder:
    """Collects report lines; with ``enabled`` False (a hook call, where no one reads the
    report) it keeps none and builds an empty report."""

    lines: list[ReportLine] = field(default_factory=list)
    enabled: bool = True

    def add(
        self, resource: str, understood_as: str, used: bool, reason: str = "", **kw: Any
    ) -> None:
        if self.enabled:
            self.lines.append(ReportLine(resource, understood_as, used, reason, **kw))

    def ignore(self, resource: str, understood_as: str, reason: str, **kw: Any) -> None:
        self.add(resource, understood_as, False, reason, **kw)

    def build(self) -> IngestReport:
        # grouped by resource (a duplicate sits beside the copy that was read), stable otherwise
        return IngestReport(tuple(sorted(self.lines, key=lambda line: line.resource)))
