"""IV fluids among draft orders: composition, volume and rate as far as the order states them.

Composition comes from, in order of trust: Medication.ingredient strengths (Ratio), then the
text of the codings and labels, including the names of RxNorm codes listed in
``data/fluids.toml``: RxNorm clinical-drug names with strengths ("sodium chloride 9 MG/ML
Injectable Solution", "glucose 50 MG/ML / sodium chloride 0.0769 MEQ/ML ...", "0.9 G/100ML"),
percentages ("Sodium chloride 3% 500 mL", "D5 1/2NS with 20 mEq/L KCl", "0.45% NaCl") and
the names clinicians use ("NS", "half normal saline", "lactated Ringer's"). Volume and rate
come from dosageInstruction.doseAndRate (doseQuantity, rateQuantity, rateRatio), else from
the text.

An order that looks like an IV fluid (an ATC I.V.-solution code, fluid words with an
intravenous route or a large volume) but whose make-up cannot be read is reported by
:func:`unidentified_fluid`, so that it is shown to the clinician rather than passed over.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from functools import cache
from typing import Any

from cds_service.clinical.context import DraftUnidentified
from cds_service.fhir import units
from cds_service.fhir._data import load
from cds_service.fhir._json import codings, items, number, obj, text
from cds_service.fhir.medications import (
    ATC_SYSTEM,
    RXNORM_SYSTEM,
    MedicationNames,
    ingredient_concepts,
)

_NUM = r"(\d+(?:\.\d+)?)"
_SALINE = r"(?:sodium chloride|nacl|saline|ns\b)"
_NACL_PCT = (
    re.compile(_NUM + r"\s*%\s*" + _SALINE),
    re.compile(r"(?:sodium chloride|nacl|saline)\s*(?:injection\s*|solution\s*)?" + _NUM + r"\s*%"),
)
_HALF = re.compile(
    r"(?:\b1/2|\bhalf|\bone[- ]half)[- ]?(?:normal saline|ns\b|strength saline)|\bhalf[- ]normal"
)
_QUARTER = re.compile(r"(?:\b1/4|\bquarter|\bone[- ]quarter)[- ]?(?:normal saline|ns\b)")
_NORMAL = re.compile(r"\bnormal saline\b|\bns\b|\bd\d+ns\b|\bisotonic saline\b")
_WATER = re.compile(r"\bd\d+w\b|\bin water\b|\bdextrose \d+(?:\.\d+)?% water\b")
_DEX = (
    re.compile(r"\bd(5|10|20|50|70)(?=w\b|ns\b|lr\b|\b)"),
    re.compile(_NUM + r"\s*%\s*(?:dextrose|glucose)"),
    re.compile(r"(?:dextrose|glucose)\s*(?:injection\s*|solution\s*)?" + _NUM + r"\s*%"),
)
_KCL = (
    re.compile(
        _NUM + r"\s*(?:meq|mmol)\s*(?:/\s*(?:l|liter|litre|1000\s*ml)\b)?\s*(?:of\s+)?"
        r"(?:kcl|potassium chloride|potassium|k\b)"
    ),
    re.compile(r"(?:kcl|potassium chloride)\s*" + _NUM + r"\s*(?:meq|mmol)"),
)
_LR = re.compile(r"lactated ringer|ringer'?s? lactate|hartmann|\blr\b|\bd\d+\s?lr\b")
# "hypertonic saline" with no strength: read as 3 %, the usual strength (common practice), so
# the order is still checked as hypertonic rather than passed over as an unknown drug.
_HYPERTONIC = re.compile(r"\bhypertonic (?:saline|sodium chloride|nacl)\b")
_PLASMALYTE = re.compile(r"plasma-?\s?lyte|plasmalyte")
_PLASMALYTE_RX = re.compile(r"sodium gluconate")  # RxNorm names list the ingredients only
_LR_RX = re.compile(r"sodium lactate")
# A strength after a solute name: "sodium chloride 9 mg/ml", "glucose 50 mg/ml", "sodium
# chloride 0.154 meq/ml", "potassium chloride 0.02 meq/ml", "dextrose 5 g/100 ml".
_STRENGTH = re.compile(
    r"(sodium chloride|nacl|potassium chloride|kcl|dextrose|glucose)"
    r"(?:\s+(?:anhydrous|monohydrate|hydrous))?\s+"
    + _NUM
    + r"\s*(mg|g|meq|mmol)\s*/\s*(\d+(?:\.\d+)?)?\s*(ml|dl|l)\b"
)
_STRENGTH_KEY = {
    "sodium chloride": "nacl",
    "nacl": "nacl",
    "potassium chloride": "kcl",
    "kcl": "kcl",
    "dextrose": "dextrose",
    "glucose": "dextrose",
}
_UCUM = {"mg": "mg", "g": "g", "meq": "meq", "mmol": "mmol", "ml": "mL", "dl": "dL", "l": "L"}
# A volume, not the denominator of a strength ("0.9 g/100 ml" states no volume).
_VOLUME = re.compile(r"(?<![\d./])" + _NUM + r"\s*(ml|l)\b(?!\s*/)")
_RATE = re.compile(_NUM + r"\s*ml\s*/\s*(?:h|hr|hour)\b")

_NACL_NAMES = ("sodium chloride", "nacl")
_DEX_NAMES = ("dextrose", "glucose")
_KCL_NAMES = ("potassium chloride", "kcl")
_LARGE_VOLUME_L = 0.25  # with fluid words, a volume this large reads as an IV fluid


@cache
def _vocab() -> dict[str, Any]:
    return load("fluids")


def _rx_ingredients() -> dict[str, str]:
    return {k: v for k, v in _vocab()["rxnorm_ingredients"].items() if isinstance(v, str)}


def product_names(med: dict[str, Any]) -> list[str]:
    """RxNorm concept names (data/fluids.toml) of the fluid codes on a Medication holder, so a
    code sent without a display still states its strengths."""
    table = _vocab()["rxnorm_products"]
    out = []
    for concept in [obj(med.get("code")), *ingredient_concepts(med)]:
        for system, code, _ in codings(concept):
            if system == RXNORM_SYSTEM and code in table:
                out.append(str(table[code]["name"]))
    return out


@dataclass(frozen=True, slots=True)
class Composition:
    nacl_percent: float | None = None
    dextrose_percent: float | None = None
    added_potassium_mmol_per_l: float | None = None
    named_solution: str | None = None
    volume_l: float | None = None
    rate_ml_per_h: float | None = None

    @property
    def is_fluid(self) -> bool:
        return (
            self.named_solution is not None
            or self.nacl_percent is not None
            or self.dextrose_percent is not None
        )


def _first(patterns: tuple[re.Pattern[str], ...], t: str) -> float | None:
    for pattern in patterns:
        m = pattern.search(t)
        if m:
            return float(m.group(1))
    return None


def _convert(key: str, num: tuple[float, str], den: tuple[float, str]) -> float | None:
    """A solute strength in the composition's unit: NaCl and dextrose in g/dL (%), KCl in
    mmol/L; moles and equivalents convert through the solute's molar mass."""
    if key == "kcl":
        mass = units.solute_molar_mass("potassium_chloride")
        return units.concentration(num, den, "mmol/L", mass, 1)
    solute = "sodium_chloride" if key == "nacl" else "dextrose"
    return units.concentration(num, den, "g/dL", units.solute_molar_mass(solute), 1)


def strengths(t: str) -> dict[str, float]:
    """Solute strengths written after solute names in lowercase text (first one per solute)."""
    found: dict[str, float] = {}
    for m in _STRENGTH.finditer(t):
        key = _STRENGTH_KEY[m[1]]
        num = (float(m[2]), _UCUM[m[3]])
        den = (float(m[4]) if m[4] else 1.0, _UCUM[m[5]])
        value = _convert(key, num, den)
        if value is not None and key not in found:
            found[key] = round(value, 4)
    return found


def parse_text(label: str) -> Composition:
    """Composition stated in free text (one label or several joined by ' | ')."""
    t = label.lower()
    # RxNorm names a balanced solution by its ingredient list: its sodium chloride and
    # potassium chloride strengths are part of the solution, not additions to it.
    listed = _LR_RX.search(t) is not None or _PLASMALYTE_RX.search(t) is not None
    named = "lactated_ringers" if _LR.search(t) or _LR_RX.search(t) else None
    if named is None and (_PLASMALYTE.search(t) or _PLASMALYTE_RX.search(t)):
        named = "plasmalyte_148"
    found = strengths(t)
    stated = {} if listed else found
    nacl = stated.get("nacl") if named is None else None
    if nacl is None and named is None:
        nacl = _first(_NACL_PCT, t)
    if nacl is None and named is None:
        if _HYPERTONIC.search(t):
            nacl = 3.0
        elif _QUARTER.search(t):
            nacl = 0.225
        elif _HALF.search(t):
            nacl = 0.45
        elif _NORMAL.search(t):
            nacl = 0.9
        elif _WATER.search(t):
            nacl = 0.0
    dextrose = _pick(found.get("dextrose"), _first(_DEX, t))
    if nacl is None and named is None and "dextrose" in found:
        nacl = 0.0  # a strength list ("glucose 50 MG/ML ...") names every ingredient
    potassium = None if listed else _pick(stated.get("kcl"), _first(_KCL, t))
    volume = rate = None
    m = _VOLUME.search(t)
    if m:
        volume = float(m.group(1)) / (1000.0 if m.group(2) == "ml" else 1.0)
    m = _RATE.search(t)
    if m:
        rate = float(m.group(1))
    return Composition(nacl, dextrose, potassium, named, volume, rate)


def _quantity(value: Any) -> tuple[float, str] | None:
    q = obj(value)
    v = number(q.get("value"))
    unit = text(q.get("code")) or text(q.get("unit"))
    if v is None:
        return None
    try:
        return v, units.resolve(unit, None, None) if unit else "1"
    except units.UnitProblem:
        return None


def _solute(concept: dict[str, Any]) -> str | None:
    rx = _rx_ingredients()
    for system, code, _ in codings(concept):
        if system == RXNORM_SYSTEM and code in rx:
            return rx[code]
    label = " ".join([text(concept.get("text")) or ""] + [d for _, _, d in codings(concept)])
    label = label.lower()
    for names, key in ((_KCL_NAMES, "kcl"), (_NACL_NAMES, "nacl"), (_DEX_NAMES, "dextrose")):
        if any(n in label for n in names):
            return key
    return None


def from_ingredients(med: dict[str, Any]) -> Composition:
    """Composition from Medication.ingredient strengths (Ratio numerator/denominator)."""
    found: dict[str, float] = {}
    for ingredient, concept in zip(
        items(med.get("ingredient")), ingredient_concepts(med), strict=False
    ):
        key = _solute(concept)
        strength = obj(obj(ingredient).get("strength"))
        num, den = _quantity(strength.get("numerator")), _quantity(strength.get("denominator"))
        if key is None or num is None or den is None:
            continue
        value = _convert(key, num, den)
        if value is not None:
            found[key] = round(value, 4)
    return Composition(found.get("nacl"), found.get("dextrose"), found.get("kcl"))


def from_dosage(resource: dict[str, Any]) -> tuple[float | None, float | None]:
    """(volume in L, rate in mL/h) from the first dosageInstruction.doseAndRate."""
    volume = rate = None
    for dosage in items(resource.get("dosageInstruction"))[:1]:
        for dr in items(obj(dosage).get("doseAndRate")):
            dr = obj(dr)
            dose = _quantity(dr.get("doseQuantity"))
            if dose is not None and volume is None:
                volume = units.concentration(dose, (1.0, "1"), "L")
            rq = _quantity(dr.get("rateQuantity"))
            if rq is not None and rate is None:
                rate = units.concentration(rq, (1.0, "1"), "mL/h")
            ratio = obj(dr.get("rateRatio"))
            num, den = _quantity(ratio.get("numerator")), _quantity(ratio.get("denominator"))
            if num is not None and den is not None and rate is None:
                rate = units.concentration(num, den, "mL/h")
    return volume, rate


def composition(resource: dict[str, Any], med: dict[str, Any], texts: list[str]) -> Composition:
    """Everything the order states about the fluid, structured data winning over text."""
    dosage_text = " ".join(
        text(obj(d).get("text")) or "" for d in items(resource.get("dosageInstruction"))
    )
    from_text = parse_text(" | ".join([*texts, *product_names(med), dosage_text]))
    structured = from_ingredients(med)
    volume, rate = from_dosage(resource)
    merged = replace(
        from_text,
        nacl_percent=_pick(structured.nacl_percent, from_text.nacl_percent),
        dextrose_percent=_pick(structured.dextrose_percent, from_text.dextrose_percent),
        added_potassium_mmol_per_l=_pick(
            structured.added_potassium_mmol_per_l, from_text.added_potassium_mmol_per_l
        ),
        volume_l=_pick(volume, from_text.volume_l),
        rate_ml_per_h=_pick(rate, from_text.rate_ml_per_h),
    )
    if merged.named_solution is not None:  # its ingredient list is the solution itself
        merged = replace(merged, added_potassium_mmol_per_l=from_text.added_potassium_mmol_per_l)
    if structured.is_fluid and merged.nacl_percent is None and merged.named_solution is None:
        merged = replace(merged, nacl_percent=0.0)  # dextrose in water
    return merged


def _pick(first: float | None, second: float | None) -> float | None:
    return first if first is not None else second


def _intravenous(resource: dict[str, Any], t: str) -> bool:
    for dosage in items(resource.get("dosageInstruction")):
        for _system, code, display in codings(obj(dosage).get("route")):
            if code == _IV_ROUTE_SNOMED or "intravenous" in display.lower():
                return True
    return any(
        re.search(rf"(?<![\w.]){re.escape(w)}(?![\w])", t)
        for w in _vocab()["looks_like_fluid"]["intravenous"]
    )


_IV_ROUTE_SNOMED = "47625008"  # SNOMED CT Intravenous route (as in the FHIR R4 examples)


def unidentified(
    resource: dict[str, Any], med: dict[str, Any], found: MedicationNames, comp: Composition
) -> DraftUnidentified | None:
    """The draft as an unidentified order (a fluid whose make-up cannot be read, or a drug
    coded only in systems Tonicity does not read and named by no generic name it knows), or
    None when it is identified. ``resource_id`` and ``selected`` are left for the caller."""
    if comp.is_fluid:
        return None
    why = _unreadable_fluid(resource, med, found, comp)
    kind = "fluid"
    if why is None and found.codes and not found.identified:
        systems = unique_systems(found.codes)
        why = f"coded in {', '.join(systems)}, a code system Tonicity does not read"
        kind = "drug"
    if why is None:
        return None
    shown = found.display or (found.texts[0] if found.texts else "")
    if not shown:
        shown = ", ".join(found.codes) or "no name or code sent"
    return DraftUnidentified("", shown, kind, why, found.codes)


def unique_systems(codes: tuple[str, ...]) -> list[str]:
    return list(dict.fromkeys(c.split("|", 1)[0] or "no system" for c in codes))


def _unreadable_fluid(
    resource: dict[str, Any], med: dict[str, Any], found: MedicationNames, comp: Composition
) -> str | None:
    """Why the draft looks like an IV fluid whose make-up could not be read, or None.

    It looks like one when it carries an ATC code of the I.V. solutions (fluids.toml), or
    fluid words ("saline", "maintenance fluid" ...) with an intravenous route or a volume of
    250 mL or more, or an intravenous volume that large with no drug name at all.
    """
    prefixes = tuple(_vocab()["atc"]["fluid_prefixes"])
    for concept in [obj(med.get("code")), *ingredient_concepts(med)]:
        for system, code, _ in codings(concept):
            if system == ATC_SYSTEM and code.upper().startswith(prefixes):
                return f"ATC {code} is an I.V. solution group; its composition is not stated"
    dosage_text = " ".join(
        text(obj(d).get("text")) or "" for d in items(resource.get("dosageInstruction"))
    )
    t = " | ".join([*found.texts, dosage_text]).lower()
    volume, _ = from_dosage(resource)
    large = (volume if volume is not None else comp.volume_l or 0.0) >= _LARGE_VOLUME_L
    iv = _intravenous(resource, t)
    words = [w for w in _vocab()["looks_like_fluid"]["words"] if w in t]
    if words and (iv or large):
        return (
            f"reads as an IV fluid ('{words[0]}') but its sodium, potassium and dextrose "
            "content could not be read"
        )
    if iv and large and not found.names:
        return "an intravenous volume with no fluid or drug name that Tonicity can read"
    return None
