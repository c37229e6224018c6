"""May the service fetch from the client's ``fhirServer``, and what may it read there?

Checked once per hook call, before any request leaves the service:

- outside a local trial ``fhirServer`` must be ``https`` (CDS Hooks 2.0.1, "Calling a CDS
  Service": the scheme MUST be https when production data is exchanged);
- ``fhirAuthorization`` (CDS Hooks 2.0.1, "Passing the Access Token to the CDS Service"):
  ``token_type`` is ``Bearer``, its ``patient`` (when sent) is the context's patient, and its
  ``scope`` grants each read the service would make. Scopes are SMART App Launch's, both
  forms: v1 ``patient/Observation.read`` (``read``, ``*``) and v2 ``patient/Observation.rs``
  (``c r u d s`` in that order), with ``*`` for every resource type. A v2 scope narrowed by a
  query (``...rs?category=laboratory``) grants part of a search only: it does not count.

A token for another patient or of another type is refused with a 401; a read the scope does
not grant is not attempted (the key is "not available", and a required one ends in a 412).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from cds_service.hooks.models import FhirAuthorization

#: SMART clinical-data scope: context / resource type or * / permissions [ ? query ].
_SCOPE = re.compile(
    r"(?P<context>patient|user|system)/(?P<type>[A-Z][A-Za-z]*|\*)\."
    r"(?P<perms>read|write|\*|c?r?u?d?s?)(?P<query>\?.*)?"
)


class AccessRefused(Exception):
    """The authorization the client sent cannot be used for this call (answered with 401)."""


@dataclass(frozen=True, slots=True)
class Grant:
    """The reads one ``fhirAuthorization`` grants."""

    scopes: tuple[str, ...]

    def covers(self, resource_type: str, interaction: str) -> bool:
        """Does a scope grant ``interaction`` (``read`` or ``search``) on ``resource_type``?"""
        for scope in self.scopes:
            m = _SCOPE.fullmatch(scope)
            if m is None or m["query"] or m["type"] not in (resource_type, "*"):
                continue
            perms = m["perms"]
            if perms in ("read", "*"):  # v1: read covers read and search
                return True
            if perms and perms not in ("write",):
                if ("r" if interaction == "read" else "s") in perms:
                    return True
        return False


def https_required(server: str, *, local_trial: bool) -> str | None:
    """Why ``server`` may not be contacted (not https outside a local trial), or None."""
    if local_trial:
        return None
    if not server.lower().startswith("https://"):
        return "fhirServer must be an https URL outside a local trial"
    return None


def check_authorization(auth: FhirAuthorization, patient_id: str) -> Grant:
    """The grant of ``auth`` for a call about ``patient_id``; raises AccessRefused."""
    if auth.token_type.strip().lower() != "bearer":  # RFC 6749 7.1: case-insensitive
        raise AccessRefused(
            f"fhirAuthorization.token_type must be Bearer, not {auth.token_type[:40]!r}"
        )
    granted_patient = getattr(auth, "patient", None)
    if granted_patient not in (None, "") and granted_patient != patient_id:
        raise AccessRefused(
            "fhirAuthorization.patient is not the patient in context.patientId: the token "
            "grants access to another patient's record"
        )
    return Grant(tuple(auth.scope.split()))


def query_interaction(query: str) -> tuple[str, str]:
    """(resource type, ``read`` | ``search``) of a relative FHIR query ``Type/id`` or
    ``Type?params``."""
    path, sep, _ = query.partition("?")
    rtype, slash, _ = path.partition("/")
    return rtype, "read" if slash and not sep else "search"
