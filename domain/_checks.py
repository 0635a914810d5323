"""Input checks and the output convention shared by the domain modules (private).

Output convention: a vectorised domain function returns a Python ``float`` when
every array input was a scalar (the broadcast result is 0-d) and a
``numpy.ndarray`` of float64 otherwise.

Range checks on arrays ignore NaN on purpose: element-wise formulas let NaN
through to the result, so a missing value in one offer does not hide the
others. Functions that reduce a series or build a decision (capitalisation
rates, ranking) reject non-finite values instead.
"""

from __future__ import annotations

import numbers
from typing import Any

import numpy as np

from domain.errors import InvalidInput


def as_output(value: Any) -> float | np.ndarray:
    """Return a Python float for a 0-d result, else a float64 array."""
    result = np.asarray(value, dtype=float)
    if result.ndim == 0:
        return float(result)
    return result


def float_array(field: str, value: Any) -> np.ndarray:
    """Convert a number or array-like to a float64 array, or raise InvalidInput."""
    if isinstance(value, (str, bytes)):
        raise InvalidInput(field, f"must be a number or an array of numbers, got {value!r}")
    try:
        return np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InvalidInput(field, f"must be a number or an array of numbers, got {value!r}") from None


def check_array_range(
    field: str,
    values: np.ndarray,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
) -> None:
    """Raise InvalidInput if a non-NaN element lies outside the given range.

    Infinite elements are rejected; NaN elements are let through.
    """
    if np.any(np.isinf(values)):
        raise InvalidInput(field, "must be finite (NaN is let through, infinity is not)")
    if low is not None:
        bad = values <= low if low_open else values < low
        if np.any(bad):
            relation = ">" if low_open else ">="
            raise InvalidInput(field, f"must be {relation} {low:g}, got {_first(values, bad)!r}")
    if high is not None:
        bad = values >= high if high_open else values > high
        if np.any(bad):
            relation = "<" if high_open else "<="
            raise InvalidInput(field, f"must be {relation} {high:g}, got {_first(values, bad)!r}")


def _first(values: np.ndarray, bad: np.ndarray) -> float:
    return float(np.broadcast_to(values, bad.shape)[bad].flat[0])


def finite_scalar(
    field: str,
    value: Any,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
) -> float:
    """Return value as a float after checking it is a finite real in range."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InvalidInput(field, f"must be a number, got {value!r}")
    number = float(value)
    if not np.isfinite(number):
        raise InvalidInput(field, f"must be finite, got {number!r}")
    if low is not None and (number <= low if low_open else number < low):
        relation = ">" if low_open else ">="
        raise InvalidInput(field, f"must be {relation} {low:g}, got {number:g}")
    if high is not None and (number >= high if high_open else number > high):
        relation = "<" if high_open else "<="
        raise InvalidInput(field, f"must be {relation} {high:g}, got {number:g}")
    return number


def whole_number(field: str, value: Any, *, low: int, high: int | None = None) -> int:
    """Return value as an int after checking it is a whole number in [low, high].

    Integer-valued floats (30.0) are accepted; booleans and fractions are not.
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InvalidInput(field, f"must be a whole number, got {value!r}")
    number = float(value)
    if not np.isfinite(number) or number != int(number):
        raise InvalidInput(field, f"must be a whole number, got {value!r}")
    whole = int(number)
    if whole < low:
        raise InvalidInput(field, f"must be >= {low}, got {whole}")
    if high is not None and whole > high:
        raise InvalidInput(field, f"must be <= {high}, got {whole}")
    return whole
