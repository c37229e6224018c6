"""Tonicity pathway: which one class a hyponatremia belongs to.

The class follows the diagnostic algorithm of the 2014 European guideline (Spasovski 2014,
section 7.1) read by **effective** osmolality: the measured osmolality minus its ineffective
part, urea and ethanol, which cross cell membranes and hold no water outside cells (the part
that was not measured is not subtracted). Effective osmolality < 275 mOsm/kg is hypotonic,
275-295 isotonic, > 295 hypertonic.

Glucose first, then what remains: in hyperglycemia the sodium is corrected for glucose
(Hillier 1999, the factor measured in hyperglycemic patients, judges; Katz 1973, the older
and smaller estimate, is shown beside it). When the
corrected sodium is still low, the hyponatremia that remains is hypotonic and is worked up as
such (``residual``); otherwise the low sodium is translocational (hypertonic). Without a
measured osmolality the class is unknown, or in hyperglycemia rests on the corrected sodium
alone (provisional). The result is always exactly one class.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

from cds_service.clinical.formulas import effective_measured_osmolality
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
    #: Measured osmolality minus urea (and measured ethanol); None without a measured value.
    effective_osmolality: float | None = None
    #: Hypotonic hyponatremia that remains once glucose is accounted for (corrected sodium
    #: still low while the effective osmolality alone would not call it hypotonic).
    residual: bool = False


def is_hyperglycemic(glucose_mg_dl: float | None, th: Thresholds) -> bool:
    return glucose_mg_dl is not None and glucose_mg_dl > th.hyperglycemia_above


def classify(
    measured_osmolality: float | None,
    glucose_mg_dl: float | None,
    th: Thresholds,
    *,
    urea_nitrogen_mg_dl: float | None = None,
    ethanol_mg_dl: float | None = None,
    corrected_sodium: float | None = None,
) -> TonicityCall:
    """Exactly one tonicity class for a low sodium.

    ``corrected_sodium`` is the glucose-corrected sodium the judgement uses (given by the
    caller in hyperglycemia); a corrected sodium below the normal range leaves a residual
    hypotonic hyponatremia.
    """
    hyper = is_hyperglycemic(glucose_mg_dl, th)
    still_low = hyper and corrected_sodium is not None and corrected_sodium < th.sodium_lower_normal
    if measured_osmolality is None:
        if not hyper:
            return TonicityCall(Tonicity.UNKNOWN, provisional=True, hyperglycemia=False)
        tonicity = Tonicity.HYPOTONIC if still_low else Tonicity.HYPERTONIC
        return TonicityCall(tonicity, provisional=True, hyperglycemia=True, residual=still_low)
    effective = effective_measured_osmolality(
        measured_osmolality, urea_nitrogen_mg_dl, ethanol_mg_dl, th
    )
    residual = False
    if effective < th.tonicity_hypotonic_below:
        tonicity = Tonicity.HYPOTONIC
    elif still_low:
        tonicity, residual = Tonicity.HYPOTONIC, True
    elif effective > th.tonicity_hypertonic_above or hyper:
        tonicity = Tonicity.HYPERTONIC
    else:
        tonicity = Tonicity.ISOTONIC
    return TonicityCall(
        tonicity,
        provisional=False,
        hyperglycemia=hyper,
        effective_osmolality=effective,
        residual=residual,
    )
