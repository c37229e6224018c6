"""Shared wording of findings: the standing caution, number formatting, inputs and values."""

from __future__ import annotations

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
}


def human_unit(ucum: str) -> str:
    """The clinician's spelling of a UCUM unit code (the code itself when none is listed)."""
    return HUMAN_UNITS.get(ucum, ucum)


def qty(x: float, analyte: Analyte, display: DisplayUnits = DisplayUnits.CONVENTIONAL) -> str:
    """A lab quantity for card text, in the institution's display units: ``"7.2 mg/dL"``.

    Write every lab number with its unit through this function so that the display-unit
    setting (``ctx.display_units``) applies everywhere. Until SI display is implemented the
    conventional (canonical) unit is shown for both settings.
    """
    del display  # SI display: see the real-records issue
    return f"{num(x)} {human_unit(CANONICAL_UNITS[analyte])}"
