"""Shared wording of findings: the standing caution, number formatting, inputs and values."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

from cds_service.clinical._data import DataFileError, read_data_file
from cds_service.clinical.context import CANONICAL_UNITS, Analyte, DisplayUnits, LabResult
from cds_service.clinical.findings import InputUsed, Value, ValueName

CAUTION = (
    "Decision support for licensed clinicians: check against the patient and local "
    "protocols. It is not an order and does not replace clinical judgement."
)

LABELS: dict[Analyte, str] = {
    Analyte.SODIUM: "Serum sodium",
    Analyte.POTASSIUM: "Serum potassium",
    Analyte.GLUCOSE: "Glucose",
    Analyte.UREA_NITROGEN: "Urea nitrogen",
    Analyte.CREATININE: "Creatinine",
    Analyte.OSMOLALITY: "Measured serum osmolality",
    Analyte.URINE_OSMOLALITY: "Urine osmolality",
    Analyte.URINE_SODIUM: "Urine sodium",
    Analyte.URINE_POTASSIUM: "Urine potassium",
    Analyte.URINE_CREATININE: "Urine creatinine",
    Analyte.URINE_UREA_NITROGEN: "Urine urea nitrogen",
    Analyte.URINE_URIC_ACID: "Urine uric acid",
    Analyte.URINE_VOLUME_24H: "Urine volume (24 h)",
    Analyte.TRIGLYCERIDES: "Triglycerides",
    Analyte.TOTAL_PROTEIN: "Total protein",
    Analyte.URIC_ACID: "Serum uric acid",
    Analyte.TSH: "TSH",
    Analyte.CORTISOL: "Cortisol",
    Analyte.BODY_WEIGHT: "Body weight",
    Analyte.BODY_HEIGHT: "Body height",
    Analyte.ETHANOL: "Ethanol",
    Analyte.FREE_T4: "Free T4",
    Analyte.EGFR: "eGFR",
}


def num(x: float, digits: int = 1) -> str:
    """A number for text: rounded to ``digits`` decimals, without a trailing ``.0``."""
    text = f"{round(x, digits):.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def signed(x: float, digits: int = 1) -> str:
    return ("+" if round(x, digits) > 0 else "") + num(x, digits)


def value(name: ValueName, x: float, digits: int = 1) -> Value:
    """A named value rounded for display."""
    return Value(name, round(x, digits))


def used(result: LabResult) -> InputUsed:
    """The input record of a lab result, with the notes a clinician needs to weigh it."""
    notes = []
    if result.comparator:
        notes.append(f"reported as {result.comparator}{num(result.value, 2)}")
    if result.preliminary:
        notes.append("preliminary")
    if result.direct_ise:
        notes.append("whole blood, direct ISE")
    return InputUsed(
        label=LABELS[result.analyte],
        value=round(result.value, 2),
        unit=result.unit,
        time=result.time,
        source_id=result.source_id,
        note=", ".join(notes) or None,
    )


def shorten(text: str, limit: int) -> str:
    """``text`` cut to at most ``limit`` characters with an ellipsis."""
    return text if len(text) <= limit else text[: limit - 1].rstrip() + "…"


def unique(items: list[str] | tuple[str, ...]) -> tuple[str, ...]:
    """Items in first-seen order without repeats."""
    return tuple(dict.fromkeys(items))


#: How clinicians write each canonical UCUM unit in card text (one spelling everywhere;
#: UCUM codes stay in the machine fields).
HUMAN_UNITS: dict[str, str] = {
    "mmol/L": "mmol/L",
    "mg/dL": "mg/dL",
    "g/dL": "g/dL",
    "ug/dL": "µg/dL",
    "mosm/kg": "mOsm/kg",
    "m[IU]/L": "mIU/L",
    "L": "L",
    "kg": "kg",
    "cm": "cm",
    "ng/dL": "ng/dL",
    "mL/min/{1.73_m2}": "mL/min/1.73 m²",
    "umol/L": "µmol/L",
    "nmol/L": "nmol/L",
    "pmol/L": "pmol/L",
    "g/L": "g/L",
    "mL/h": "mL/h",
    "ug": "µg",
}


def human_unit(ucum: str) -> str:
    """The clinician's spelling of a UCUM unit code (the code itself when none is listed)."""
    return HUMAN_UNITS.get(ucum, ucum)


@dataclass(frozen=True, slots=True)
class SiUnit:
    unit: str  # UCUM
    factor: float  # SI = conventional x factor


@cache
def si_units() -> dict[Analyte, SiUnit]:
    """SI display units per analyte (``clinical/data/display_units.toml``)."""
    table = read_data_file("display_units.toml").get("si")
    if not isinstance(table, dict):
        raise DataFileError("display_units.toml: needs [si.<analyte>] tables")
    out = {}
    for key, entry in table.items():
        try:
            factor = float(entry["factor"])
            if "molar_mass" in entry:  # the exact factor: a power of ten over the molar mass
                mass = float(entry["molar_mass"])
                factor = 10 ** round(math.log10(factor * mass)) / mass
            out[Analyte(key)] = SiUnit(str(entry["unit"]), factor)
        except (ValueError, KeyError, TypeError) as exc:
            raise DataFileError(f"display_units.toml: [si.{key}]: {exc}") from None
    return out


def _significant(x: float) -> int:
    """Significant digits of a value as it stands (at most 6, the precision the FHIR layer
    keeps after unit conversion)."""
    text = f"{abs(x):.6g}"
    if "e" in text:
        text = f"{abs(x):.6f}"
    if "." not in text:  # a whole number: every digit as sent counts (540 has three)
        return len(text.lstrip("0")) or 1
    return len(text.replace(".", "").lstrip("0")) or 1


def _round_significant(x: float, sig: int) -> float:
    if x == 0:
        return 0.0
    return round(x, sig - 1 - math.floor(math.log10(abs(x))))


def display_value(
    x: float, analyte: Analyte, display: DisplayUnits = DisplayUnits.CONVENTIONAL
) -> tuple[float, str]:
    """(value, UCUM unit) for card text. In SI the converted value keeps the significant
    digits of the value it came from (at least two), so 1.2 mg/dL creatinine reads
    110 µmol/L, not 106.08: no precision the laboratory did not report."""
    si = si_units().get(analyte) if display is DisplayUnits.SI else None
    if si is None:
        return round(x, 1), CANONICAL_UNITS[analyte]
    return _round_significant(x * si.factor, max(_significant(x), 2)), si.unit


def qty(x: float, analyte: Analyte, display: DisplayUnits = DisplayUnits.CONVENTIONAL) -> str:
    """A lab quantity for card text, in the institution's display units: ``"7.2 mg/dL"``,
    or with ``display`` SI ``"2.6 mmol/L"``.

    Write every lab number with its unit through this function so that the display-unit
    setting (``ctx.display_units``) applies everywhere; machine values stay canonical.
    """
    value, unit = display_value(x, analyte, display)
    return f"{num(value, 6)} {human_unit(unit)}"
