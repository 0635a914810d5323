"""Load shapes: a year of hourly loading, built from daily curves or measured, and the
figures that load-loss costing needs from it (peak, load factor, loss factor, RMS)."""

from __future__ import annotations

import calendar
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from domain._checks import float_array
from domain.errors import InvalidInput

__all__ = [
    "DayCurves",
    "ShapeFigures",
    "apparent_power",
    "expand_daily_curves",
    "fill_short_gaps",
    "hours_in_year",
    "load_duration_curve",
    "shape_figures",
]


@dataclass(frozen=True)
class DayCurves:
    """Hourly loading for one season: 24 weekday values and 24 weekend values [any unit]."""

    months: tuple[int, ...]
    weekday: tuple[float, ...]
    weekend: tuple[float, ...]


@dataclass(frozen=True)
class ShapeFigures:
    """What load-loss costing needs from a load shape."""

    hours: int
    peak: float
    mean: float
    load_factor: float
    loss_factor: float
    rms_pu: float
    equivalent_hours: float


def hours_in_year(year: int) -> int:
    return 8784 if calendar.isleap(year) else 8760


def expand_daily_curves(year: int, seasons: Sequence[DayCurves]) -> np.ndarray:
    """A year of hourly values from weekday and weekend curves per season.

    Parameters
    ----------
    year : int
        Calendar year the curves are laid on (decides weekdays and leap day).
    seasons : sequence of DayCurves
        Every month 1..12 must belong to exactly one season.

    Returns
    -------
    numpy.ndarray
        8760 (or 8784) hourly values, hour 0 being 00:00-01:00 on 1 January.

    Notes
    -----
    Monday to Friday take the weekday curve, Saturday and Sunday the weekend
    curve; public holidays are not modelled.

    References
    ----------
    Common practice in distribution planning (typical-day load curves).
    """
    by_month: dict[int, DayCurves] = {}
    for index, season in enumerate(seasons):
        for curve_name in ("weekday", "weekend"):
            values = float_array(f"seasons[{index}].{curve_name}", getattr(season, curve_name))
            if values.shape != (24,):
                raise InvalidInput(f"seasons[{index}].{curve_name}", "needs 24 hourly values")
            if not np.all(np.isfinite(values)) or np.any(values < 0):
                raise InvalidInput(f"seasons[{index}].{curve_name}", "values must be finite and >= 0")
        for month in season.months:
            if month not in range(1, 13):
                raise InvalidInput(f"seasons[{index}].months", f"{month} is not a month (1..12)")
            if month in by_month:
                raise InvalidInput(f"seasons[{index}].months", f"month {month} is in two seasons")
            by_month[month] = season
    missing = sorted(set(range(1, 13)) - set(by_month))
    if missing:
        raise InvalidInput("seasons", f"months {missing} belong to no season")
    days = []
    for month in range(1, 13):
        season = by_month[month]
        for day in range(1, calendar.monthrange(year, month)[1] + 1):
            weekend = calendar.weekday(year, month, day) >= 5
            days.append(season.weekend if weekend else season.weekday)
    return np.asarray(days, dtype=float).reshape(-1)


def apparent_power(active_kw: Any, power_factor: Any) -> np.ndarray:
    """Apparent power from active power and power factor: kVA = kW / pf.

    Losses follow the current, so a shape metered in kW is turned into kVA
    before its figures are taken. Power factor must lie in (0, 1].
    """
    p = float_array("kw", active_kw)
    pf = float_array("power_factor", power_factor)
    if np.any(~(pf > 0) | (pf > 1)):
        raise InvalidInput("power_factor", "must lie in (0, 1]")
    return p / pf


def fill_short_gaps(values: Any, max_gap_hours: int) -> tuple[np.ndarray, int]:
    """Fill runs of missing hours (NaN) no longer than ``max_gap_hours`` by straight lines.

    Returns the filled series and the number of hours filled. Longer runs, and
    runs at either end of the series (nothing to draw a line to), stay NaN for
    the caller to report.
    """
    series = float_array("values", values).copy()
    missing = np.isnan(series)
    if not missing.any():
        return series, 0
    known = np.flatnonzero(~missing)
    if known.size == 0:
        return series, 0
    filled = 0
    edges = np.diff(np.concatenate(([0], missing.view(np.int8), [0])))
    for start, stop in zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True):
        if stop - start > max_gap_hours or start == 0 or stop == series.size:
            continue
        series[start:stop] = np.interp(np.arange(start, stop), [start - 1, stop], [series[start - 1], series[stop]])
        filled += int(stop - start)
    return series, filled


def load_duration_curve(values: Any) -> np.ndarray:
    """The loads sorted from highest to lowest (the load duration curve)."""
    return np.sort(float_array("values", values))[::-1]


def shape_figures(values: Any) -> ShapeFigures:
    """Peak, mean, load factor, loss factor, RMS (pu of peak) and equivalent hours of load loss.

    Parameters
    ----------
    values : array_like
        Hourly loading [any unit], finite, >= 0, not all zero.

    Notes
    -----
    LF = mean(P) / max(P); LsF = mean(P**2) / max(P)**2; RMS = sqrt(LsF) in pu of
    the peak; equivalent hours = LsF * hours, the hours at peak load that give
    the year's load-loss energy.

    References
    ----------
    Textbook definitions (distribution engineering texts); docs/references.md R4.
    """
    series = float_array("values", values)
    if series.ndim != 1 or series.size == 0:
        raise InvalidInput("values", "need a one-dimensional series of hourly values")
    if not np.all(np.isfinite(series)) or np.any(series < 0):
        raise InvalidInput("values", "values must be finite and >= 0")
    peak = float(series.max())
    if peak <= 0:
        raise InvalidInput("values", "the series is all zero")
    relative = series / peak
    lsf = float(np.mean(relative * relative))
    return ShapeFigures(
        hours=int(series.size),
        peak=peak,
        mean=float(series.mean()),
        load_factor=float(relative.mean()),
        loss_factor=lsf,
        rms_pu=float(np.sqrt(lsf)),
        equivalent_hours=lsf * series.size,
    )
