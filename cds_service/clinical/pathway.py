"""Tonicity pathway: which one class a hyponatremia belongs to, from measured osmolality.

Hypotonic < 275 mOsm/kg, isotonic 275-295, hypertonic > 295 (Spasovski 2014). Hyperglycemia
makes the hyponatremia translocational (hypertonic) unless the measured osmolality is
hypotonic. Without a measured osmolality the class is unknown, except with hyperglycemia,
where it is hypertonic provisionally. The result is always exactly one class.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

from cds_service.clinical.thresholds import Thresholds


class Tonicity(StrEnum):
    HYPOTONIC = "hypotonic"
    ISOTONIC = "isotonic"
    HYPERTONIC = "hypertonic"
    UNKNOWN = "unknown"


@dataclass(frozen=True, slots=True)
class TonicityCall:
    tonicity: Tonicity
    provisional: bool  # True when no measured osmolality supports the class
    hyperglycemia: bool


def is_hyperglycemic(glucose_mg_dl: float | None, th: Thresholds) -> bool:
    return glucose_mg_dl is not None and glucose_mg_dl > th.hyperglycemia_above


def classify(
    measured_osmolality: float | None, glucose_mg_dl: float | None, th: Thresholds
) -> TonicityCall:
    """Exactly one tonicity class for a low sodium."""
    hyper = is_hyperglycemic(glucose_mg_dl, th)
    if measured_osmolality is None:
        tonicity = Tonicity.HYPERTONIC if hyper else Tonicity.UNKNOWN
        return TonicityCall(tonicity, provisional=True, hyperglycemia=hyper)
    if measured_osmolality < th.tonicity_hypotonic_below:
        tonicity = Tonicity.HYPOTONIC
    elif measured_osmolality > th.tonicity_hypertonic_above or hyper:
        tonicity = Tonicity.HYPERTONIC
    else:
        tonicity = Tonicity.ISOTONIC
    return TonicityCall(tonicity, provisional=False, hyperglycemia=hyper)
