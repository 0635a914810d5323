"""Load shape statistics: load factor, loss factor and RMS loading.

A series is a 1-D array of load samples over a period (hourly samples are
usual), in any unit (kW, kVA, per unit); the factors are dimensionless. A 2-D
array holds one series per row and gives one value per row.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from domain._checks import as_output, check_array_range, float_array
from domain.errors import InvalidInput

__all__ = ["load_factor", "loss_factor", "rms_loading", "loss_factor_from_load_factor"]


def _validated_series(series: Any, *, require_peak: bool) -> np.ndarray:
    p = float_array("series", series)
    if p.ndim not in (1, 2):
        raise InvalidInput("series", f"must be 1-D (or 2-D, one series per row), got {p.ndim}-D")
    if p.size == 0:
        raise InvalidInput("series", "must not be empty")
    if not np.all(np.isfinite(p)):
        raise InvalidInput("series", "must contain only finite values")
    if np.any(p < 0):
        raise InvalidInput("series", "must not contain negative values")
    if require_peak and np.any(p.max(axis=-1) == 0):
        raise InvalidInput("series", "must not be all zero (the peak divides)")
    return p


def load_factor(series: Any) -> float | np.ndarray:
    """Load factor of a load series: average load over peak load.

    Parameters
    ----------
    series : array_like
        Load samples [any unit, e.g. kW or pu], 1-D, or 2-D with one series per
        row (computed along the last axis). Non-negative, finite, not all zero.

    Returns
    -------
    float or numpy.ndarray
        LF [fraction, 0..1]: a float for a 1-D series, an array per row for 2-D.

    Notes
    -----
    LF = mean(P) / max(P).

    References
    ----------
    Textbook definition (distribution engineering texts).
    """
    p = _validated_series(series, require_peak=True)
    # Scale by the peak first so that denormal samples do not round the mean to zero.
    return as_output(np.mean(p / p.max(axis=-1, keepdims=True), axis=-1))


def loss_factor(series: Any) -> float | np.ndarray:
    """Loss factor of a load series: average of the squared load over the squared peak.

    Parameters
    ----------
    series : array_like
        Load samples [any unit, e.g. kW or pu], 1-D, or 2-D with one series per
        row (computed along the last axis). Non-negative, finite, not all zero.

    Returns
    -------
    float or numpy.ndarray
        LsF [fraction, 0..1]; LF**2 <= LsF <= LF always holds.

    Notes
    -----
    LsF = mean(P**2) / max(P)**2: the ratio of the average load loss to the
    load loss at peak, since load loss scales with the square of the load.

    References
    ----------
    Textbook definition (distribution engineering texts).
    """
    p = _validated_series(series, require_peak=True)
    # Scale by the peak before squaring so that tiny or huge samples neither
    # underflow nor overflow.
    relative = p / p.max(axis=-1, keepdims=True)
    return as_output(np.mean(relative * relative, axis=-1))


def rms_loading(series: Any) -> float | np.ndarray:
    """Root-mean-square value of a load series, the loading to cost load losses at.

    Parameters
    ----------
    series : array_like
        Load samples [any unit, e.g. kW or pu], 1-D, or 2-D with one series per
        row. Non-negative and finite; an all-zero series is allowed (RMS 0).

    Returns
    -------
    float or numpy.ndarray
        RMS load [same unit as ``series``].

    Notes
    -----
    P_rms = sqrt(mean(P**2)). Load loss over the period equals the rated load
    loss times (P_rms / P_rated)**2; costing with the average load instead
    understates it (mean(P)**2 <= mean(P**2)).

    References
    ----------
    Common practice.
    """
    p = _validated_series(series, require_peak=False)
    peak = p.max(axis=-1, keepdims=True)
    # Scaled by the peak (as in loss_factor) so squaring cannot underflow or overflow.
    with np.errstate(invalid="ignore", divide="ignore"):
        relative = np.where(peak > 0, p / peak, 0.0)
    return as_output(peak[..., 0] * np.sqrt(np.mean(relative * relative, axis=-1)))


def loss_factor_from_load_factor(load_factor: Any, k: Any = 0.3) -> float | np.ndarray:
    """Estimate the loss factor from the load factor when no load series is known.

    Parameters
    ----------
    load_factor : float or array_like
        Load factor LF [fraction, 0..1]. NaN propagates.
    k : float or array_like, optional
        Weighting coefficient [dimensionless, 0..1]; 0.3 is the classic value
        for distribution feeders. Broadcast against ``load_factor``.

    Returns
    -------
    float or numpy.ndarray
        Estimated loss factor LsF [fraction, 0..1].

    Notes
    -----
    LsF = k * LF + (1 - k) * LF**2. Check: LF = 0.65, k = 0.3 gives 0.49075.

    References
    ----------
    Buller and Woodrow (1928), as quoted in distribution engineering textbooks
    (from memory); the check value is a published worked example.
    """
    lf = float_array("load_factor", load_factor)
    kk = float_array("k", k)
    check_array_range("load_factor", lf, low=0.0, high=1.0)
    check_array_range("k", kk, low=0.0, high=1.0)
    return as_output(kk * lf + (1.0 - kk) * lf * lf)
