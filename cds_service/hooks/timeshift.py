"""Move a sample's timeline to the present.

The invented samples are written for one fixed evaluation time; a running deployment
evaluates at its own clock. ``tonicity replay`` and the workbench move every FHIR
dateTime/instant by the same interval (and every ``birthDate`` by whole days), so the
intervals between results, and therefore every finding, stay as written.
"""

from __future__ import annotations

import re
from datetime import date, datetime, timedelta
from typing import Any

_DATETIME = re.compile(r"^(\d{4}-\d{2}-\d{2}T\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?)(Z|[+-]\d{2}:\d{2})$")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def shift_times(data: Any, delta: timedelta) -> Any:
    """A copy of ``data`` with every FHIR dateTime/instant moved by ``delta`` and every
    ``birthDate`` by the same number of whole days."""
    if isinstance(data, dict):
        return {
            k: _shift_date(v, delta) if k == "birthDate" else shift_times(v, delta)
            for k, v in data.items()
        }
    if isinstance(data, list):
        return [shift_times(v, delta) for v in data]
    if isinstance(data, str):
        m = _DATETIME.match(data)
        if m:
            zone = m.group(2)
            t = datetime.fromisoformat(m.group(1) + ("+00:00" if zone == "Z" else zone))
            shifted = (t + delta).isoformat()
            return shifted.replace("+00:00", "Z") if zone == "Z" else shifted
    return data


def _shift_date(value: Any, delta: timedelta) -> Any:
    if isinstance(value, str) and _DATE.match(value):
        try:
            return (date.fromisoformat(value) + timedelta(days=delta.days)).isoformat()
        except ValueError:
            return value
    return value
