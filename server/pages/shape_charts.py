"""Chart options for load shapes (JSON-ready dicts for ECharts): the typical days, an average
day per month, and the load duration curve.

Pure functions over plain values, like ``server.pages.charts``; ``static/js/charts.js`` draws them.
"""

from __future__ import annotations

import calendar
from datetime import date
from typing import Any

import numpy as np

from server.pages.charts import FONT, GRID_COLOUR, TEXT_COLOUR

# Points a page draws of a load duration curve: plenty for a line a few hundred pixels wide.
DURATION_POINTS = 400
HOUR_LABELS = [f"{h:02d}:00" for h in range(24)]
MONTH_NAMES = [calendar.month_abbr[m] for m in range(1, 13)]
# One colour per season (weekday solid, weekend dashed); calm and distinct in print.
SEASON_COLOURS = ["#2a7f8e", "#d4912a", "#8a6bb1", "#52606d", "#3f8f4f", "#b5525c"]
DURATION_COLOUR = "#1f6b76"


def unit_label(unit: str) -> str:
    """The stored values' unit as a person reads it."""
    return {"pu": "pu", "kva": "kVA", "kw": "kW"}.get(unit, unit)


def _frame(y_name: str) -> dict[str, Any]:
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "axis"},
        "yAxis": {
            "type": "value",
            "name": y_name,
            "nameTextStyle": {"align": "left"},
            "min": 0,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
    }


def daily_curves_chart(seasons: list[dict[str, Any]], unit: str = "pu") -> dict[str, Any]:
    """Steps of each season's weekday and weekend curve over the 24 hours of a day.

    ``seasons`` as stored with a daily load shape: name, months, weekday[24], weekend[24].
    Each value holds for its whole hour, so the last one is repeated at 24:00 to draw its step.
    """
    series = []
    for index, season in enumerate(seasons):
        colour = SEASON_COLOURS[index % len(SEASON_COLOURS)]
        for day_type, dash in (("weekday", "solid"), ("weekend", "dashed")):
            series.append({
                "name": f"{season['name']}, {day_type}",
                "type": "line",
                "step": "end",
                "symbol": "none",
                "lineStyle": {"color": colour, "type": dash, "width": 2},
                "itemStyle": {"color": colour},
                "data": [round(float(v), 4) for v in [*season[day_type], season[day_type][-1]]],
            })
    return _frame(f"Load ({unit_label(unit)})") | {
        "legend": {"top": 0, "left": 0, "itemWidth": 22, "itemHeight": 10, "textStyle": {"fontSize": 13}},
        "grid": {"left": 56, "right": 24, "top": 76, "bottom": 48},
        "xAxis": {
            "type": "category",
            "data": [*HOUR_LABELS, "24:00"],
            "boundaryGap": False,
            "name": "Hour of the day",
            "nameLocation": "middle",
            "nameGap": 30,
            "axisLabel": {"interval": 2},
        },
        "series": series,
    }


def monthly_average_days(values: list[float], year: int) -> list[list[float]]:
    """The average load at each hour of the day, for each month: 12 lists of 24 values.

    ``values`` are the year's hourly values from 00:00 on 1 January of ``year``.
    """
    series = np.asarray(values, dtype=float)
    days = series.reshape(-1, 24)
    months = np.array([date.fromordinal(date(year, 1, 1).toordinal() + d).month for d in range(days.shape[0])])
    return [days[months == m].mean(axis=0).tolist() for m in range(1, 13)]


def _month_colour(month: int) -> str:
    """Cool blue in winter to warm amber in summer (northern seasons), by distance from January."""
    warmth = (1 - np.cos((month - 1) / 12 * 2 * np.pi)) / 2
    cold, warm = np.array([0x2a, 0x5f, 0x9e]), np.array([0xd4, 0x91, 0x2a])
    r, g, b = (cold + (warm - cold) * warmth).round().astype(int)
    return f"#{r:02x}{g:02x}{b:02x}"


def monthly_average_day_chart(values: list[float], year: int, unit: str) -> dict[str, Any]:
    """Lines of the average day of each month of a metered year."""
    averages = monthly_average_days(values, year)
    series = [
        {
            "name": MONTH_NAMES[m],
            "type": "line",
            "symbol": "none",
            "lineStyle": {"color": _month_colour(m + 1), "width": 1.6},
            "itemStyle": {"color": _month_colour(m + 1)},
            "data": [round(v, 4) for v in day],
        }
        for m, day in enumerate(averages)
    ]
    return _frame(f"Average load ({unit_label(unit)})") | {
        "legend": {"top": 0, "left": 0, "itemWidth": 18, "itemHeight": 8, "textStyle": {"fontSize": 12}},
        "grid": {"left": 64, "right": 24, "top": 76, "bottom": 48},
        "xAxis": {
            "type": "category",
            "data": HOUR_LABELS,
            "boundaryGap": False,
            "name": "Hour of the day",
            "nameLocation": "middle",
            "nameGap": 30,
            "axisLabel": {"interval": 2},
        },
        "series": series,
    }


def downsample_duration_curve(curve: list[float], points: int = DURATION_POINTS) -> list[list[float]]:
    """[hours, load] pairs at about ``points`` evenly spaced hours of a duration curve.

    The first (peak) and last (least) hours are always kept; ``hours`` is the number of
    hours in the year with at least that load (1 for the peak).
    """
    n = len(curve)
    if n == 0:
        return []
    index = np.unique(np.linspace(0, n - 1, min(points, n)).round().astype(int))
    return [[int(k) + 1, round(float(curve[k]), 4)] for k in index]


def duration_curve_chart(curve: list[float], unit: str) -> dict[str, Any]:
    """The load duration curve: load against the hours a year it is reached or exceeded."""
    data = downsample_duration_curve(curve)
    return _frame(f"Load ({unit_label(unit)})") | {
        "tooltip": {"trigger": "axis", "axisPointer": {"type": "line"}},
        "grid": {"left": 64, "right": 24, "top": 40, "bottom": 48},
        "xAxis": {
            "type": "value",
            "min": 0,
            "max": len(curve),
            "name": "Hours a year at or above the load",
            "nameLocation": "middle",
            "nameGap": 30,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
        "series": [{
            "name": "Load",
            "type": "line",
            "symbol": "none",
            "lineStyle": {"color": DURATION_COLOUR, "width": 2},
            "itemStyle": {"color": DURATION_COLOUR},
            "areaStyle": {"color": "rgba(31, 107, 118, 0.12)"},
            "data": data,
        }],
    }
