"""Validate one raw resource with its fhir.resources R4B model; a short reason when invalid.

Observations are validated in their *read* form: only the elements Tonicity reads (status,
code, subject, effective[x], issued, value[x], dataAbsentReason, interpretation, method,
specimen, component) go through the
R4B model, so a narrative or reference range Tonicity never looks at costs nothing and cannot
make a usable result unusable. Within one request, Observations that differ only in id, time
and numeric value share one validation (keyed by the rest, see :func:`_key`): times are parsed
strictly by ``times.parse_datetime``, and a JSON number is always a valid FHIR decimal (a
value sent as a string is part of the shared key, so it is validated on its own).

Validation is a pure function of the JSON it is given, so answers are also kept across
requests (:class:`_Answers`, bounded): a record system sends the same shapes again and again
(the same patient's results on every chart opening, the same order templates), and each is
checked once per process. The cache holds only a 16-byte digest of what was checked and the
one-line answer, never the resource (no patient data stays behind).
"""

from __future__ import annotations

import hashlib
import marshal
import math
import threading
from collections import OrderedDict
from functools import cache
from importlib import import_module
from typing import Any

_MODULES = {
    "Observation": "observation",
    "Patient": "patient",
    "Condition": "condition",
    "Medication": "medication",
    "MedicationRequest": "medicationrequest",
    "MedicationStatement": "medicationstatement",
    "MedicationAdministration": "medicationadministration",
}
_READ = {
    "Observation": (
        "resourceType", "id", "status", "code", "subject", "effectiveDateTime",
        "effectivePeriod", "effectiveInstant", "issued", "valueQuantity", "valueString",
        "valueInteger", "dataAbsentReason", "interpretation", "method", "specimen",
        "component",
    ),
}  # fmt: skip
_UNSEEN: Any = object()


_ABSENT: Any = ...  # a read field the resource lacks: Ellipsis is no JSON value
_VOLATILE = frozenset({"id", "effectiveDateTime", "effectivePeriod", "effectiveInstant", "issued"})


#: The read fields a shared check covers (all but the volatile ones), in key order.
_SHARED = {t: tuple(k for k in fields if k not in _VOLATILE) for t, fields in _READ.items()}
_QUANTITY_AT = {t: fields.index("valueQuantity") for t, fields in _SHARED.items()}

RESOURCE_TYPES = tuple(_MODULES)


def shared_fields(resource_type: str) -> tuple[str, ...]:
    """The fields one shared check of ``resource_type`` covers, in key order."""
    return _SHARED[resource_type]


@cache
def model_for(resource_type: str) -> Any:
    module = import_module(f"fhir.resources.R4B.{_MODULES[resource_type]}")
    return getattr(module, resource_type)


class _Answers:
    """Validation answers by digest of (resource type, key of the checked JSON); LRU-bounded."""

    def __init__(self, size: int) -> None:
        if size < 1:
            raise ValueError("the validation cache needs room for at least one answer")
        self._size = size
        self._answers: OrderedDict[bytes, str | None] = OrderedDict()
        self._lock = threading.Lock()

    def check(
        self, resource_type: str, data: dict[str, Any], key: bytes | None = None
    ) -> str | None:
        """``_check(resource_type, data)``; ``key`` stands for ``data`` (:func:`_key`)."""
        text = resource_type.encode("utf-8", "surrogatepass") + b"\0"
        text += _key(data) if key is None else key
        digest = hashlib.blake2b(text, digest_size=16).digest()
        with self._lock:
            if digest in self._answers:
                self._answers.move_to_end(digest)
                return self._answers[digest]
        answer = _check(resource_type, data)
        with self._lock:
            self._answers[digest] = answer
            if len(self._answers) > self._size:
                self._answers.popitem(last=False)
        return answer


_ANSWERS = _Answers(4096)


def _check(resource_type: str, resource: dict[str, Any]) -> str | None:
    try:
        model_for(resource_type).model_validate(resource)
    except Exception as exc:  # pydantic ValidationError, or anything the models raise
        errors = getattr(exc, "errors", None)
        if callable(errors):
            try:
                first = errors()[0]
                where = ".".join(str(p) for p in first.get("loc", ()))
                return f"invalid FHIR R4 {resource_type}: {where}: {first.get('msg', '')}"[:200]
            except Exception:  # noqa: S110 - fall through to the generic message
                pass
        return f"invalid FHIR R4 {resource_type}: {type(exc).__name__}"
    return None


def _key(data: Any) -> bytes:
    """Bytes that stand for exactly this parsed JSON. marshal gives back the value it wrote,
    so equal bytes mean equal data (1, 1.0 and True differ); equal data written with other
    sharing may give other bytes, which only costs one more check. About a third of the cost
    of repr() and a fifth of json.dumps(sort_keys=True)."""
    try:
        return b"m" + marshal.dumps(data)
    except ValueError:  # nested deeper than marshal goes
        return b"r" + repr(data).encode("utf-8", "surrogatepass")


def _is_json_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def problem(resource: dict[str, Any], memo: dict[bytes, str | None] | None = None) -> str | None:
    """None when ``resource`` is valid FHIR R4 for its type, else a one-line reason.

    ``memo`` (one per request) lets Observations that differ only in id and time share a check.
    """
    resource_type = resource.get("resourceType")
    if resource_type not in _MODULES:
        return f"resource type {resource_type!r} is not read"
    fields = _READ.get(resource_type)
    if fields is None:
        return _ANSWERS.check(resource_type, resource)
    if memo is None:
        return _ANSWERS.check(resource_type, {k: resource[k] for k in fields if k in resource})
    # The key: the read, non-volatile fields in a fixed order (absent ones as Ellipsis), with
    # a numeric valueQuantity.value as 0; no copy of the resource unless it must be checked.
    shared_fields = _SHARED[resource_type]
    parts = [resource.get(k, _ABSENT) for k in shared_fields]
    quantity = resource.get("valueQuantity")
    if isinstance(quantity, dict) and _is_json_number(quantity.get("value")):
        parts[_QUANTITY_AT[resource_type]] = {**quantity, "value": 0}
    key = _key(parts)
    found = memo.get(key, _UNSEEN)
    if found is _UNSEEN:  # validate exactly what the key stands for, never one time or value
        shared = {k: v for k, v in zip(shared_fields, parts, strict=True) if v is not _ABSENT}
        found = memo[key] = _ANSWERS.check(resource_type, shared, key)
    return found
