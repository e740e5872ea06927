"""Practical relevance: a ratio band and two one-sided tests (TOST) on the log scale.

With the band (low, high), equivalence at level alpha holds when the (1 - 2 alpha) CI of
the ratio lies inside the band (Schuirmann 1987, J. Pharmacokin. Biopharm. 15:657-680;
the 90% CI inside 0.80-1.25 rule of the WHO and US FDA bioequivalence guidance).
"""

from __future__ import annotations

import math

import numpy as np

from .defaults import DEFAULT_BAND, check_band, parse_band
from .distributions import t_cdf, t_ppf, t_sf
from .vocabulary import BandClass

__all__ = ["BAND_CLASSES", "DEFAULT_BAND", "band_class", "check_band", "parse_band", "tost"]

#: Class names, in the order the app lists them, each with its plain meaning.
BAND_CLASSES: dict[BandClass, str] = {
    "different": "the CI excludes 1 and reaches outside the band: a difference that may matter",
    "minor-difference": "the CI excludes 1 but the 90% CI lies inside the band: real but small",
    "equivalent": "the 90% CI lies inside the band and the CI includes 1: equivalent",
    "inconclusive": "the CI includes 1 and the 90% CI reaches outside the band: more data needed",
}


def tost(
    difference: np.ndarray,
    standard_error: np.ndarray,
    df: np.ndarray,
    band: tuple[float, float] = DEFAULT_BAND,
    alpha: float = 0.05,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (p_tost, low bound, high bound of the (1 - 2 alpha) CI of the ratio)."""
    check_band(*band)
    log_low, log_high = math.log(band[0]), math.log(band[1])
    with np.errstate(divide="ignore", invalid="ignore"):
        p_lower = t_sf((difference - log_low) / standard_error, df)
        p_upper = t_cdf((difference - log_high) / standard_error, df)
        critical = t_ppf(1 - alpha, df)
        low = np.exp(difference - critical * standard_error)
        high = np.exp(difference + critical * standard_error)
    return np.maximum(p_lower, p_upper), low, high


def band_class(
    ci_low: np.ndarray,
    ci_high: np.ndarray,
    tost_low: np.ndarray,
    tost_high: np.ndarray,
    band: tuple[float, float] = DEFAULT_BAND,
) -> np.ndarray:
    """Classify each comparison (see BAND_CLASSES); empty string where not computable."""
    excludes_one = (ci_low > 1) | (ci_high < 1)
    inside = (tost_low >= band[0]) & (tost_high <= band[1])
    computable = np.isfinite(ci_low) & np.isfinite(ci_high) & np.isfinite(tost_low)
    classes = np.where(
        excludes_one,
        np.where(inside, "minor-difference", "different"),
        np.where(inside, "equivalent", "inconclusive"),
    )
    return np.where(computable, classes, "")
