"""Clinical thresholds, factors and limits: ``data/thresholds.toml`` plus institution overrides.

``load_thresholds()`` returns the file's values; ``load_thresholds({"correction_limit_24h": 8})``
returns them with overrides (from the ``[clinical]`` table of the configuration file). The
file is read once; an unknown key, a missing entry or an inconsistent set of values raises
``ValueError`` when the object is built, so the request path has nothing left to check.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields, replace
from functools import cache
from types import MappingProxyType

from cds_service.clinical._data import (
    DataFileError,
    check_locator,
    check_source,
    cite,
    read_data_file,
    require,
)

_FILE = "thresholds.toml"


@dataclass(frozen=True, slots=True)
class ThresholdEntry:
    key: str
    value: float
    unit: str
    source: str
    from_memory: bool
    note: str = ""
    locator: str = ""  # where in the source the figure stands (section, table, page)

    @property
    def citation(self) -> str:
        return cite(self.source, self.from_memory, self.locator)


@dataclass(frozen=True, slots=True)
class Thresholds:
    """Every number the clinical rules use; field names are the keys of thresholds.toml."""

    sodium_lower_normal: float
    severity_mild_lower: float
    severity_moderate_lower: float
    acute_onset_hours: float
    adult_age_years: float
    tonicity_hypotonic_below: float
    tonicity_hypertonic_above: float
    osmolal_gap_elevated_above: float
    hyperglycemia_above: float
    glucose_mg_dl_per_mmol_l: float
    urea_nitrogen_mg_dl_per_mmol_l: float
    katz_factor: float
    hillier_factor: float
    glucose_reference: float
    triglycerides_clue_above: float
    total_protein_clue_above: float
    waugh_intercept: float
    waugh_lipid_factor: float
    waugh_protein_factor: float
    urine_osmolality_dilute_at_most: float
    urine_sodium_low_at_most: float
    urine_osmolality_minimal: float
    solute_load_typical: float
    solute_load_low: float
    furst_ratio_high: float
    furst_ratio_low: float
    siadh_uric_acid_below: float
    siadh_urea_nitrogen_below: float
    siadh_fe_urate_above: float
    siadh_fe_urea_above: float
    tsh_upper_normal: float
    cortisol_adrenal_unlikely_above: float
    reset_osmostat_min_days: float
    reset_osmostat_max_range: float
    correction_limit_24h: float
    correction_limit_48h: float
    correction_limit_24h_high_risk: float
    correction_limit_48h_high_risk: float
    high_risk_sodium_at_most: float
    correction_lookback_hours: float
    hypokalemia_below: float
    tbw_fraction_adult_male: float
    tbw_fraction_adult_female: float
    tbw_fraction_elderly_male: float
    tbw_fraction_elderly_female: float
    elderly_age_years: float
    bolus_hypertonic_volume: float
    bolus_hypertonic_minutes: float
    bolus_target_rise: float
    infusate_hypotonic_below: float
    infusate_hypertonic_above: float
    # Added with the clinical pathway revision (classification).
    ethanol_mg_dl_per_mmol_l: float
    siadh_fe_sodium_above: float
    free_t4_lower_normal: float
    cortisol_morning_from_hour: float
    cortisol_morning_until_hour: float
    renal_insufficiency_egfr_below: float
    ckd_epi_2021_constant: float
    ckd_epi_2021_kappa_female: float
    ckd_epi_2021_kappa_male: float
    ckd_epi_2021_alpha_female: float
    ckd_epi_2021_alpha_male: float
    ckd_epi_2021_upper_exponent: float
    ckd_epi_2021_age_base: float
    ckd_epi_2021_female_factor: float
    correction_limit_first_24h_europe: float
    correction_limit_next_24h_europe: float
    correction_goal_24h_low: float
    correction_goal_24h_high: float
    correction_goal_24h_high_risk: float
    rise_confirm_within_hours: float
    bolus_repeats: float
    bolus_recheck_minutes: float
    hypertonic_stop_sodium: float
    acute_fall_hypertonic_above: float
    moderate_symptoms_aim_rise_24h: float
    relowering_free_water_ml_per_kg: float
    relowering_free_water_minutes: float
    desmopressin_relowering_ug: float
    desmopressin_min_interval_hours: float
    #: Which correction limits apply (configuration ``[clinical] correction_guideline``):
    #: "stricter" (both guidelines, the stricter wins), "europe" or "us". Not a number, so
    #: it is not an entry of thresholds.toml.
    correction_guideline: str = "stricter"

    def __post_init__(self) -> None:
        if self.correction_guideline not in CORRECTION_GUIDELINES:
            raise ValueError(
                f"correction_guideline must be one of {', '.join(CORRECTION_GUIDELINES)}, "
                f"not {self.correction_guideline!r}"
            )
        for f in _numeric_fields():
            v = getattr(self, f.name)
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                raise ValueError(f"threshold {f.name} must be a finite number, not {v!r}")
            if v < 0:
                raise ValueError(f"threshold {f.name} must not be negative ({v})")
        _ordered(self, "severity_moderate_lower", "severity_mild_lower", "sodium_lower_normal")
        _ordered(self, "tonicity_hypotonic_below", "tonicity_hypertonic_above")
        _ordered(self, "correction_limit_24h_high_risk", "correction_limit_24h")
        _ordered(self, "correction_limit_48h_high_risk", "correction_limit_48h")
        _ordered(self, "correction_limit_24h", "correction_limit_48h")
        _ordered(self, "correction_limit_24h_high_risk", "correction_limit_48h_high_risk")
        _ordered(self, "furst_ratio_low", "furst_ratio_high")
        _ordered(self, "correction_goal_24h_low", "correction_goal_24h_high_risk")
        _ordered(self, "correction_goal_24h_low", "correction_goal_24h_high")
        _ordered(self, "correction_limit_next_24h_europe", "correction_limit_first_24h_europe")
        _ordered(self, "infusate_hypotonic_below", "infusate_hypertonic_above")
        _ordered(self, "solute_load_low", "solute_load_typical")
        _ordered(self, "cortisol_morning_from_hour", "cortisol_morning_until_hour")
        if self.cortisol_morning_until_hour > 24:
            raise ValueError("threshold cortisol_morning_until_hour must be at most 24")
        for name in (
            "tbw_fraction_adult_male",
            "tbw_fraction_adult_female",
            "tbw_fraction_elderly_male",
            "tbw_fraction_elderly_female",
        ):
            if not 0 < getattr(self, name) <= 1:
                raise ValueError(f"threshold {name} must lie in (0, 1]")
        for name in (
            "glucose_mg_dl_per_mmol_l",
            "urea_nitrogen_mg_dl_per_mmol_l",
            "urine_osmolality_minimal",
            "correction_limit_24h_high_risk",
            "ethanol_mg_dl_per_mmol_l",
            "ckd_epi_2021_constant",
            "ckd_epi_2021_kappa_female",
            "ckd_epi_2021_kappa_male",
            "ckd_epi_2021_age_base",
        ):
            if getattr(self, name) <= 0:
                raise ValueError(f"threshold {name} must be positive")

    def entry(self, key: str) -> ThresholdEntry:
        """Where a threshold comes from (value as loaded from the file, before overrides)."""
        return threshold_entries()[key]

    def cite(self, key: str) -> str:
        return self.entry(key).citation


#: Values of ``correction_guideline``: which guideline's correction limits apply.
CORRECTION_GUIDELINES = ("stricter", "europe", "us")
_TEXT_KEYS = frozenset({"correction_guideline"})


def _numeric_fields() -> tuple:
    return tuple(f for f in fields(Thresholds) if f.name not in _TEXT_KEYS)


def _ordered(th: Thresholds, *names: str) -> None:
    values = [getattr(th, n) for n in names]
    if values != sorted(values):
        raise ValueError("thresholds must satisfy " + " <= ".join(names))


@cache
def threshold_entries() -> Mapping[str, ThresholdEntry]:
    """Every entry of thresholds.toml with unit and source, validated."""
    out: dict[str, ThresholdEntry] = {}
    for group, table in read_data_file(_FILE).items():
        if not isinstance(table, dict):
            raise DataFileError(f"{_FILE}: {group} must be a table")
        for key, entry in table.items():
            where = f"[{group}] {key}"
            if not isinstance(entry, dict):
                raise DataFileError(f"{_FILE}: {where} must be an inline table")
            if key in out:
                raise DataFileError(f"{_FILE}: {key} is defined twice")
            out[key] = ThresholdEntry(
                key=key,
                value=float(require(_FILE, where, entry, "value", int | float)),
                unit=require(_FILE, where, entry, "unit", str),
                source=check_source(_FILE, where, entry.get("source")),
                from_memory=require(_FILE, where, entry, "from_memory", bool),
                note=entry.get("note", ""),
                locator=check_locator(_FILE, where, entry),
            )
    names = {f.name for f in _numeric_fields()}
    if set(out) != names:
        raise DataFileError(
            f"{_FILE}: missing {sorted(names - set(out))}, unknown {sorted(set(out) - names)}"
        )
    return MappingProxyType(out)


@cache
def _defaults() -> Thresholds:
    return Thresholds(**{k: e.value for k, e in threshold_entries().items()})


def load_thresholds(overrides: Mapping[str, float] | None = None) -> Thresholds:
    """The thresholds of the data file, with ``overrides`` (key -> number) applied.

    Raises ``ValueError`` for an unknown key, a non-number, or values that contradict each
    other (for example a 24-h limit above the 48-h limit).
    """
    base = _defaults()
    if not overrides:
        return base
    known = threshold_entries()
    unknown = sorted(set(overrides) - set(known) - _TEXT_KEYS)
    if unknown:
        raise ValueError(f"unknown clinical threshold(s): {', '.join(unknown)}")
    values = {k: v if k in _TEXT_KEYS else _number(k, v) for k, v in overrides.items()}
    return replace(base, **values)


def _number(key: str, v: object) -> object:
    """An override as a float: ints and numeric strings (environment variables) convert;
    anything else is left for ``Thresholds`` to refuse with its message."""
    if isinstance(v, bool):
        return v
    if isinstance(v, int):
        return float(v)
    if isinstance(v, str):
        try:
            return float(v)
        except ValueError:
            raise ValueError(f"clinical threshold {key} must be a number, not {v!r}") from None
    return v
