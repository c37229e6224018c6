"""Check the prefetch a CDS client sent against our templates.

For every template key the client may have sent:

- data (a resource or a Bundle): used as is;
- ``null``: the client ran the query and found nothing, so there is no data (not an error);
- an ``OperationOutcome``: the client could not get the data; it counts as not available (we
  may still fetch it ourselves) and the reason is kept so cards can say what was missing;
- nothing at all: the key is missing and is fetched from ``fhirServer`` when we may.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from cds_service.errors import UserError
from cds_service.hooks.fetch import has_next


@dataclass(slots=True)
class PrefetchState:
    """What we know per template key after checking the prefetch (and, later, fetching)."""

    #: key -> resource or Bundle; ``None`` means "no data" (the client's ``null``).
    data: dict[str, dict[str, Any] | None] = field(default_factory=dict)
    #: key -> why it is not available (OperationOutcome text, fetch error ...).
    unavailable: dict[str, str] = field(default_factory=dict)
    #: keys the client did not send at all (or sent as an OperationOutcome).
    to_fetch: list[str] = field(default_factory=list)
    #: key -> why only the first page(s) of its paged Bundle were read.
    partial: dict[str, str] = field(default_factory=dict)

    def paged(self) -> dict[str, dict[str, Any]]:
        """Prefetched Bundles (by key) whose ``next`` link leads to more results."""
        return {k: v for k, v in self.data.items() if v is not None and has_next(v)}

    def settle(
        self,
        key: str,
        data: dict[str, Any] | None,
        error: str | None,
        *,
        partial: bool = False,
    ) -> None:
        """Record the outcome of fetching ``key`` ourselves (or of following its pages)."""
        if partial and data is not None:
            self.data[key] = data
            self.unavailable.pop(key, None)
            self.partial[key] = error or "stopped at the page limit (fhir.max_pages)"
        elif error is None:
            self.data[key] = data
            self.unavailable.pop(key, None)
            self.partial.pop(key, None)
        else:
            previous = self.unavailable.get(key)
            self.unavailable[key] = f"{previous}; {error}" if previous else error

    def resources(self) -> list[dict[str, Any]]:
        return [d for d in self.data.values() if d is not None]


def outcome_text(outcome: Mapping[str, Any]) -> str:
    """A short, readable reason taken from an OperationOutcome's issues."""
    parts: list[str] = []
    for issue in outcome.get("issue") or []:
        if not isinstance(issue, Mapping):
            continue
        details = issue.get("details")
        text = issue.get("diagnostics") or (
            details.get("text") if isinstance(details, Mapping) else None
        )
        parts.append(str(text or issue.get("code") or "error")[:200])
    return "; ".join(parts) or "OperationOutcome without issues"


def check_prefetch(prefetch: Mapping[str, Any] | None, keys: list[str]) -> PrefetchState:
    """Sort the client's prefetch by template key. Raises UserError for malformed values."""
    state = PrefetchState()
    supplied = prefetch or {}
    for key in keys:
        if key not in supplied:
            state.to_fetch.append(key)
            continue
        value = supplied[key]
        if value is None:
            state.data[key] = None
            continue
        if not isinstance(value, Mapping) or not isinstance(value.get("resourceType"), str):
            raise UserError(f"prefetch key {key!r} is neither a FHIR resource nor null")
        if value["resourceType"] == "OperationOutcome":
            state.unavailable[key] = f"client could not prefetch: {outcome_text(value)}"
            state.to_fetch.append(key)
            continue
        state.data[key] = dict(value)
    return state
