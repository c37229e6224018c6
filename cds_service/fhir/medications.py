"""Medication names: RxNorm and ATC codes and lowercase generic names from whatever a record
sends (RxNorm ingredient and clinical-drug codes, WHO ATC codes, product labels)."""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cache
from typing import Any

from cds_service.fhir._data import load
from cds_service.fhir._json import codings, concept_text, items, obj, text

RXNORM_SYSTEM = "http://www.nlm.nih.gov/research/umls/rxnorm"
ATC_SYSTEM = "http://www.whocc.no/atc"
#: Code systems whose medication codes Tonicity reads (codes) or can at least name (SNOMED CT
#: products and substances are read through their displays). A draft coded only in other
#: systems, with no generic name Tonicity knows, is shown as unidentified.
KNOWN_SYSTEMS = frozenset({RXNORM_SYSTEM, ATC_SYSTEM, "http://snomed.info/sct"})
_BRACKETS = re.compile(r"\[[^\]]*\]|\([^)]*\)")
_SPLIT = re.compile(r"\s+/\s+|\s+\+\s+|\s+and\s+")
_CLAUSE = re.compile(r"[,;(]")  # "atorvastatin 40 mg tablet, at night": the name ends at the comma
_TOKEN = re.compile(r"[a-z][a-z'\-]*|\S+")


@dataclass(frozen=True, slots=True)
class MedicationNames:
    names: tuple[str, ...]
    rxnorm: tuple[str, ...]
    display: str
    texts: tuple[str, ...]  # every text seen (concept text, coding displays, ingredients)
    codes: tuple[str, ...] = ()  # "system|code" of every coding, as read
    atc: tuple[str, ...] = ()

    @property
    def identified(self) -> bool:
        """Coded in a system Tonicity reads, or named by a generic name it knows."""
        known = _known_names()
        if any(c.split("|", 1)[0] in KNOWN_SYSTEMS for c in self.codes):
            return True
        return any(n in known for n in self.names)


@cache
def _vocab() -> tuple[dict[str, str], frozenset[str], frozenset[str]]:
    data = load("medications")
    names = data["names"]
    return (
        dict(data["rxnorm_ingredients"]),
        frozenset(names["salt_words"]),
        frozenset(names["form_words"]),
    )


@cache
def _atc() -> dict[str, str]:
    """ATC code -> lowercase generic name (data/medications.toml [atc_ingredients])."""
    table = load("medications")["atc_ingredients"]
    return {k.upper(): v for k, v in table.items() if isinstance(v, str)}


@cache
def _known_names() -> frozenset[str]:
    return frozenset(_vocab()[0].values()) | frozenset(_atc().values())


def generic_names(label: str) -> list[str]:
    """Lowercase generic names in a product label.

    "Hydrochlorothiazide 25 MG Oral Tablet" -> ["hydrochlorothiazide"];
    "Lisinopril 20 MG / Hydrochlorothiazide 12.5 MG Oral Tablet" -> both;
    "Sertraline hydrochloride 50 mg" -> ["sertraline hydrochloride", "sertraline"].
    """
    _, salts, forms = _vocab()
    out: list[str] = []
    product = _CLAUSE.split(_BRACKETS.sub(" ", label.lower()), maxsplit=1)[0]
    for part in _SPLIT.split(product):
        words: list[str] = []
        for token in part.split():
            if token[0].isdigit() or "%" in token or token in forms:
                break
            words.append(token.strip(".:"))
        words = [w for w in words if w]
        if not words:
            continue
        full = " ".join(words)
        core = [words[0], *[w for w in words[1:] if w not in salts]]
        for name in (full, " ".join(core)):
            if len(name) >= 3 and name not in out:
                out.append(name)
    return out


def _contained(resource: dict[str, Any], ref: str) -> dict[str, Any] | None:
    wanted = ref[1:]
    for c in items(resource.get("contained")):
        c = obj(c)
        if c.get("resourceType") == "Medication" and c.get("id") == wanted:
            return c
    return None


def medication_of(resource: dict[str, Any], index: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """The Medication a request/statement/administration names, as a concept holder.

    Returns ``{"code": CodeableConcept, "ingredient": [...]}``: for medicationCodeableConcept
    just the concept; for medicationReference the referenced Medication (contained ``#id``,
    or in the same bundle by ``Medication/id`` or full URL), or its display as text.
    """
    concept = resource.get("medicationCodeableConcept")
    if isinstance(concept, dict):
        return {"code": concept}
    ref_obj = obj(resource.get("medicationReference"))
    ref = text(ref_obj.get("reference"))
    med: dict[str, Any] | None = None
    if ref:
        if ref.startswith("#"):
            med = _contained(resource, ref)
        else:
            med = index.get(ref)
            if med is None and "Medication/" in ref:
                med = index.get("Medication/" + ref.rsplit("Medication/", 1)[1])
    if med is not None:
        return med
    display = text(ref_obj.get("display"))
    return {"code": {"text": display}} if display else {}


def ingredient_concepts(med: dict[str, Any]) -> list[dict[str, Any]]:
    return [
        obj(obj(i).get("itemCodeableConcept"))
        for i in items(med.get("ingredient"))
        if isinstance(obj(i).get("itemCodeableConcept"), dict)
    ]


def names_of(med: dict[str, Any]) -> MedicationNames:
    """Generic names and RxNorm codes of a Medication-like holder (see :func:`medication_of`)."""
    rx_table, _, _ = _vocab()
    atc_table = _atc()
    rxnorm: list[str] = []
    atc: list[str] = []
    codes: list[str] = []
    texts: list[str] = []
    names: list[str] = []
    for concept in [obj(med.get("code")), *ingredient_concepts(med)]:
        for system, code, display in codings(concept):
            if code:
                codes.append(f"{system}|{code}")
            if system == RXNORM_SYSTEM and code:
                if code not in rxnorm:
                    rxnorm.append(code)
                if code in rx_table and rx_table[code] not in names:
                    names.append(rx_table[code])
            if system == ATC_SYSTEM and code:
                if code.upper() not in atc:
                    atc.append(code.upper())
                name = atc_table.get(code.upper())
                if name and name not in names:
                    names.append(name)
            if display:
                texts.append(display)
        label = text(concept.get("text"))
        if label:
            texts.append(label)
    for label in texts:
        for name in generic_names(label):
            if name not in names:
                names.append(name)
    display = concept_text(med.get("code")) or (texts[0] if texts else "")
    return MedicationNames(
        tuple(names), tuple(rxnorm), display, tuple(texts), tuple(dict.fromkeys(codes)), tuple(atc)
    )
