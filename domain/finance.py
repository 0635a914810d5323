"""Time value of money: present-worth factors used to capitalise loss costs.

Rates are fractions per year (0.08, not 8). Cash flows fall at the end of each
year t = 1..n and are discounted by (1 + i)**t.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from domain._checks import as_output, check_array_range, float_array, whole_number

__all__ = ["geometric_sum_from_log", "present_worth_factor", "present_worth_of_growing_series"]

# Bound on the term-by-term sum: far beyond any asset life, small enough to stay cheap.
MAX_SERIES_YEARS = 1000


def present_worth_factor(discount_rate: Any, years: Any) -> float | np.ndarray:
    """Present worth of one currency unit paid at the end of each year for n years.

    Parameters
    ----------
    discount_rate : float or array_like
        Discount rate i [fraction per year], i > -1.
    years : float or array_like
        Number of yearly payments n [years], n >= 0. Broadcast against
        ``discount_rate``.

    Returns
    -------
    float or numpy.ndarray
        PWF [years-equivalent, dimensionless multiplier of an annual amount].
        A Python float when both inputs are scalars. NaN in an input gives NaN
        in the matching element.

    Notes
    -----
    PWF(i, n) = (1 - (1 + i)**-n) / i, and PWF(0, n) = n (the limit).
    The numerator is evaluated as -expm1(-n * log1p(i)) so that rates close to
    zero keep their precision.

    References
    ----------
    Standard finance identity (uniform-series present-worth factor); check
    values i = 8 %, n = 30 -> 11.2578 and i = 5 %, n = 20 -> 12.4622.
    """
    i = float_array("discount_rate", discount_rate)
    n = float_array("years", years)
    check_array_range("discount_rate", i, low=-1.0, low_open=True)
    check_array_range("years", n, low=0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        level = -np.expm1(-n * np.log1p(i)) / i
    return as_output(np.where(i == 0.0, n, level))


def geometric_sum_from_log(years: Any, log_ratio: Any) -> np.ndarray:
    """Sum of r**k over k = 0..n-1, given ln r: the closed form every present worth here uses, unchecked.

    Parameters
    ----------
    years : array_like
        Number of terms n [years], >= 0 (checked by the caller).
    log_ratio : array_like
        ln r, the natural log of the ratio between one term and the one before; broadcast
        against ``years``.

    Returns
    -------
    numpy.ndarray
        (r**n - 1) / (r - 1), or n when r is 1.

    Notes
    -----
    Evaluated as expm1(n ln r) / expm1(ln r), which keeps its digits as r nears 1 (growth
    close to the discount rate). Below |ln r| = 2**-60 every r**k (k below a few hundred)
    is 1 to within an ulp, so the sum is n; the quotient would lose digits there as ln r
    nears the subnormals.

    References
    ----------
    Standard finance identity (geometric series); the expm1 form is common numerical practice.
    """
    years = np.asarray(years, dtype=float)
    log_ratio = np.asarray(log_ratio, dtype=float)
    near_one = np.abs(log_ratio) < 2.0**-60
    safe = np.where(near_one, 1.0, log_ratio)
    return np.where(near_one, years, np.expm1(years * safe) / np.expm1(safe))


def present_worth_of_growing_series(discount_rate: Any, years: int, growth: Any = 0.0) -> float | np.ndarray:
    """Present worth of a yearly amount that starts at 1 and grows geometrically.

    Parameters
    ----------
    discount_rate : float or array_like
        Discount rate i [fraction per year], i > -1.
    years : int
        Number of yearly payments n [years], a whole number 1..1000 (scalar).
    growth : float or array_like, optional
        Growth rate g of the yearly amount [fraction per year], g > -1;
        broadcast against ``discount_rate``. Default 0 (level series).

    Returns
    -------
    float or numpy.ndarray
        Present worth per unit of the first year's amount [dimensionless].
        A Python float when the rate inputs are scalars; NaN propagates.

    Notes
    -----
    PW = sum over t = 1..n of (1 + g)**(t - 1) / (1 + i)**t.
    = ((1 + g) / (1 + i))**n - 1) / (g - i) in closed form (``geometric_sum_from_log``), so
    g == i gives n / (1 + i); with g = 0 it equals ``present_worth_factor(i, n)``.

    References
    ----------
    Standard finance identity (geometric-gradient series, end-of-year flows).
    """
    i = float_array("discount_rate", discount_rate)
    g = float_array("growth", growth)
    n = whole_number("years", years, low=1, high=MAX_SERIES_YEARS)
    check_array_range("discount_rate", i, low=-1.0, low_open=True)
    check_array_range("growth", g, low=-1.0, low_open=True)
    log_discount = np.log1p(i)
    return as_output(np.exp(-log_discount) * geometric_sum_from_log(float(n), np.log1p(g) - log_discount))
