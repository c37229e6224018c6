"""IV fluids among draft orders: composition, volume and rate as far as the order states them.

Composition comes from, in order of trust: Medication.ingredient strengths (Ratio), then the
text of the codings and labels ("Sodium chloride 3% 500 mL", "D5 1/2NS with 20 mEq/L KCl",
"0.45% NaCl", "NS", "half normal saline", "lactated Ringer's"). Volume and rate come from
dosageInstruction.doseAndRate (doseQuantity, rateQuantity, rateRatio), else from the text.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from typing import Any

from cds_service.fhir import units
from cds_service.fhir._json import codings, items, number, obj, text
from cds_service.fhir.medications import RXNORM_SYSTEM, ingredient_concepts

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
_VOLUME = re.compile(_NUM + r"\s*(ml|l)\b(?!\s*/)")
_RATE = re.compile(_NUM + r"\s*ml\s*/\s*(?:h|hr|hour)\b")

_NACL_NAMES = ("sodium chloride", "nacl")
_DEX_NAMES = ("dextrose", "glucose")
_KCL_NAMES = ("potassium chloride", "kcl")
_RX = {"9863": "nacl", "8591": "kcl", "4850": "dextrose"}  # RxNorm ingredients, from memory


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


def parse_text(label: str) -> Composition:
    """Composition stated in free text (one label or several joined by ' | ')."""
    t = label.lower()
    named = "lactated_ringers" if _LR.search(t) else None
    if named is None and _PLASMALYTE.search(t):
        named = "plasmalyte_148"
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
    dextrose = _first(_DEX, t)
    potassium = _first(_KCL, t)
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
    for system, code, _ in codings(concept):
        if system == RXNORM_SYSTEM and code in _RX:
            return _RX[code]
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
        if key == "kcl":
            value = units.concentration(
                num, den, "mmol/L", units.solute_molar_mass("potassium_chloride"), 1
            )
        else:
            solute = "sodium_chloride" if key == "nacl" else "dextrose"
            value = units.concentration(num, den, "g/dL", units.solute_molar_mass(solute), 1)
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
    from_text = parse_text(" | ".join([*texts, dosage_text]))
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
    if structured.is_fluid and merged.nacl_percent is None and merged.named_solution is None:
        merged = replace(merged, nacl_percent=0.0)  # dextrose in water
    return merged


def _pick(first: float | None, second: float | None) -> float | None:
    return first if first is not None else second
