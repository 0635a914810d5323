"""Time value of money: present-worth factors used to capitalise loss costs.

Rates are fractions per year (0.08, not 8). Cash flows fall at the end of each
year t = 1..n and are discounted by (1 + i)**t.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from domain._checks import as_output, check_array_range, float_array, whole_number

__all__ = ["present_worth_factor", "present_worth_of_growing_series"]

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


def present_worth_of_growing_series(discount_rate: Any, years: int, growth: Any = 0.0) -> float | np.ndarray:
    """Present worth of a yearly amount that starts at 1 and grows geometrically.

    Parameters
    ----------
    discount_rate : float or array_like
        Discount rate i [fraction per year], i > -1.
    years : int
        Number of yearly payments n [years], a whole number 1..1000 (scalar;
        the sum is taken term by term).
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
    The sum is taken term by term (no closed form), so g == i needs no special
    case; with g = 0 it equals ``present_worth_factor(i, n)``.

    References
    ----------
    Standard finance identity (geometric-gradient series, end-of-year flows).
    """
    i = float_array("discount_rate", discount_rate)
    g = float_array("growth", growth)
    n = whole_number("years", years, low=1, high=MAX_SERIES_YEARS)
    check_array_range("discount_rate", i, low=-1.0, low_open=True)
    check_array_range("growth", g, low=-1.0, low_open=True)
    t = np.arange(1, n + 1, dtype=float)
    i, g = np.broadcast_arrays(i, g)
    terms = np.power(1.0 + g[..., None], t - 1.0) / np.power(1.0 + i[..., None], t)
    return as_output(terms.sum(axis=-1))
