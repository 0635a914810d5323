"""Chart options for factory tests (JSON-ready dicts for ECharts): each unit's measured losses
against the guarantee and its tolerance, and a unit's efficiency and voltage regulation against
loading.

Pure functions over service results, like ``server.pages.charts``; ``static/js/charts.js`` draws them.
"""

from __future__ import annotations

import math
from typing import Any

from domain.factory_tests import (
    IEC_COMPONENT_LOSS_TOLERANCE_PCT,
    IEEE_NO_LOAD_LOSS_TOLERANCE_PCT,
)
from server import schemas
from server.pages.charts import FONT, GRID_COLOUR, LIMIT_COLOUR, LOAD_COLOUR, NO_LOAD_COLOUR, TEXT_COLOUR

GUARANTEE_COLOUR = "#52606d"
REGULATION_COLOUR = "#8a6bb1"
# Beyond this many units the serial numbers under the axis would overlap; the tooltip names them.
MAX_SERIAL_LABELS = 24


def component_limits_pct(standard: str) -> dict[str, float | None]:
    """The largest excess over the guarantee [%] one unit may show in each loss on its own.

    IEC 60076-1 Table 1 allows +15 % on each component (provided the total stays within +10 %);
    IEEE C57.12.00 allows +10 % on the no-load loss and sets no limit on the load loss alone
    (only on the total, +6 %). Both from ``domain.factory_tests`` (values from memory there).
    """
    if standard == "ieee":
        return {"no_load": IEEE_NO_LOAD_LOSS_TOLERANCE_PCT, "load": None}
    return {"no_load": IEC_COMPONENT_LOSS_TOLERANCE_PCT, "load": IEC_COMPONENT_LOSS_TOLERANCE_PCT}


def _level(series_id: str, name: str, value: float, colour: str, dashed: bool, grid: int,
           label: str) -> dict[str, Any]:
    """A horizontal line across one panel, drawn as a markLine of an empty series."""
    return {
        "id": series_id,
        "name": name,
        "type": "line",
        "xAxisIndex": grid,
        "yAxisIndex": grid,
        "data": [],
        "itemStyle": {"color": colour},
        "markLine": {
            "silent": True,
            "symbol": "none",
            "lineStyle": {"color": colour, "type": "dashed" if dashed else "solid", "width": 1.5},
            "label": {"position": "insideEndTop", "color": colour, "formatter": label},
            "data": [{"yAxis": round(value, 1)}],
        },
    }


def certificate_losses_chart(summary: schemas.CertificateSummaryOut,
                             certificates: list[schemas.CertificateOut]) -> dict[str, Any]:
    """Two panels side by side: each unit's measured no-load loss and load loss (at the reference
    temperature) as dots, the guarantee as a dashed line and the largest value the tolerance
    standard allows for that loss alone as a red line. A dot outside the tolerance (the unit's
    verdict, which also weighs the total) is drawn as a red diamond.

    Units run left to right in serial number order; losses are in W, rounded to 0.1 W.
    Series ids: ``no-load``, ``load``, ``guarantee-no-load``, ``guarantee-load``, ``limit-no-load``,
    ``limit-load`` (the last absent when the standard sets no limit on it).
    """
    serials = [c.serial_number for c in certificates]
    limits = component_limits_pct(summary.tolerance_standard)
    guarantees = {"no_load": summary.guaranteed_no_load_loss_w, "load": summary.guaranteed_load_loss_w}
    fields = {"no_load": "no_load_loss_w", "load": "load_loss_at_reference_w"}
    names = {"no_load": "No-load loss", "load": "Load loss at reference temperature"}
    colours = {"no_load": NO_LOAD_COLOUR, "load": LOAD_COLOUR}
    series: list[dict[str, Any]] = []
    y_axes: list[dict[str, Any]] = []
    for grid, part in enumerate(("no_load", "load")):
        tag = part.replace("_", "-")
        values = [getattr(c, fields[part]) for c in certificates]
        series.append({
            "id": tag,
            "name": names[part],
            "type": "scatter",
            "xAxisIndex": grid,
            "yAxisIndex": grid,
            "symbolSize": 8,
            "itemStyle": {"color": colours[part]},
            "data": [
                {"value": [serial, round(value, 1)]} if c.within_tolerance else
                {"value": [serial, round(value, 1)], "symbol": "diamond", "symbolSize": 11,
                 "itemStyle": {"color": LIMIT_COLOUR}}
                for serial, value, c in zip(serials, values, certificates, strict=True)
            ],
        })
        guarantee = guarantees[part]
        span = list(values)
        if guarantee is not None:
            series.append(_level(f"guarantee-{tag}", f"Guaranteed {names[part].lower()}", guarantee,
                                 GUARANTEE_COLOUR, True, grid, f"guaranteed {guarantee:,.0f} W"))
            span.append(guarantee)
            if limits[part] is not None:
                limit = guarantee * (1 + limits[part] / 100)
                series.append(_level(f"limit-{tag}", f"Tolerance limit, {names[part].lower()}", limit, LIMIT_COLOUR,
                                     False, grid, f"+{limits[part]:g} %: {limit:,.0f} W"))
                span.append(limit)
        low, high = (min(span), max(span)) if span else (0.0, 1.0)
        spare = max(0.05 * (high - low), 0.01 * high, 1.0)
        y_min, y_max, interval, _ = tightest_axis(max(0.0, low - spare), high + spare, least_step=1.0)
        y_axes.append({
            "type": "value",
            "gridIndex": grid,
            "name": f"{names[part]} (W)",
            "nameTextStyle": {"align": "left"},
            "min": y_min,
            "max": y_max,
            "interval": interval,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        })
    x_axes = [{
        "type": "category",
        "gridIndex": grid,
        "data": serials,
        "name": "Unit (serial number)",
        "nameLocation": "middle",
        "nameGap": 30 if len(serials) <= MAX_SERIAL_LABELS else 14,
        "axisTick": {"show": False},
        "axisLabel": {"show": len(serials) <= MAX_SERIAL_LABELS, "hideOverlap": True},
    } for grid in (0, 1)]
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "item"},
        "legend": {"top": 0, "left": 0, "itemWidth": 14, "itemHeight": 10, "textStyle": {"fontSize": 12},
                   "data": [names["no_load"], names["load"]]},
        "grid": [
            {"left": 64, "right": "53%", "top": 56, "bottom": 48},
            {"left": "55%", "right": 16, "top": 56, "bottom": 48},
        ],
        "xAxis": x_axes,
        "yAxis": y_axes,
        "series": series,
    }


def nice_axis(low: float, high: float, splits: int = 5, least_step: float = 0.0) -> tuple[float, float, float]:
    """Ends and interval of an axis of ``splits`` equal steps covering low..high, each step 1, 2,
    2.5 or 5 times a power of ten (and at least ``least_step``), so every tick is a round number."""
    span = max(high - low, least_step * splits, 1e-9)
    step = 10.0 ** math.floor(math.log10(span / splits))
    for factor in (1.0, 2.0, 2.5, 5.0, 10.0, 20.0):
        size = max(step * factor, least_step)
        start = math.floor(low / size) * size
        if start + splits * size >= high - 1e-9 * abs(high):
            return round(start, 10), round(start + splits * size, 10), round(size, 10)
    size = max(step * 50.0, least_step)
    start = math.floor(low / size) * size
    return round(start, 10), round(start + splits * size, 10), round(size, 10)


def tightest_axis(low: float, high: float, least_step: float = 0.0, ceiling: float = math.inf,
                  splits_from: tuple[int, ...] = (4, 5, 6)) -> tuple[float, float, float, int]:
    """The ``nice_axis`` of 4, 5 or 6 steps that wastes least space, not above ``ceiling``;
    and its number of steps."""
    best = None
    for splits in splits_from:
        a_min, a_max, step = nice_axis(low, high, splits, least_step)
        if a_max > ceiling + 1e-9:
            continue
        if best is None or a_max - a_min < best[1] - best[0]:
            best = (a_min, a_max, step, splits)
    if best is None:  # every choice runs past the ceiling: end there, on whole steps down from it
        a_min, a_max, step = nice_axis(low, high, splits_from[-1], least_step)
        return ceiling - splits_from[-1] * step, ceiling, step, splits_from[-1]
    return best


def analysis_curves_chart(points: list[schemas.OperatingPointOut]) -> dict[str, Any]:
    """Efficiency (left axis) and voltage regulation (right axis) against loading, at one power
    factor, from the operating points the analysis solved.

    Loadings in percent of the rating; efficiency and regulation in percent, rounded to 0.001 %.
    The efficiency axis starts above a fifth of the rating, where every curve falls to zero.
    Series ids: ``efficiency`` and ``regulation``.
    """
    x_pct = [round(100.0 * p.load_pu, 2) for p in points]
    efficiency = [round(p.efficiency_pct, 3) for p in points]
    regulation = [round(p.regulation_pct, 3) for p in points]
    shown = [eta for p, eta in zip(points, efficiency, strict=True) if p.load_pu >= 0.2] or [95.0, 100.0]
    # Both axes get the same number of steps so that their grid lines coincide.
    # Both axes get the same number of steps so that their grid lines coincide: the number that
    # wastes least of the two together.
    eta_low, eta_high = min(shown), max(shown)
    reg_low, reg_high = min(regulation + [0.0]), max(regulation + [1.0])
    choices = []
    for splits in (4, 5, 6):
        eta_axis = tightest_axis(eta_low, eta_high, least_step=0.01, ceiling=100.0, splits_from=(splits,))
        reg_axis = nice_axis(reg_low, reg_high, splits, least_step=0.1)
        waste = ((eta_axis[1] - eta_axis[0]) / max(eta_high - eta_low, 1e-6)
                 + (reg_axis[1] - reg_axis[0]) / max(reg_high - reg_low, 1e-6))
        choices.append((waste, eta_axis[:3], reg_axis))
    _, (eta_min, eta_max, eta_step), (reg_min, reg_max, reg_step) = min(choices, key=lambda c: c[0])
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "axis"},
        "legend": {"top": 0, "left": 0, "itemWidth": 18, "itemHeight": 10, "textStyle": {"fontSize": 13}},
        "grid": {"left": 64, "right": 64, "top": 48, "bottom": 52},
        "xAxis": {
            "type": "value",
            "min": 0,
            "max": x_pct[-1] if x_pct else 150,
            "interval": 25,
            "name": "Loading (% of the rating)",
            "nameLocation": "middle",
            "nameGap": 30,
            # At the foot of the plot, not where a leading power factor's regulation crosses zero.
            "axisLine": {"onZero": False},
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
        "yAxis": [
            {"type": "value", "name": "Efficiency (%)", "nameTextStyle": {"align": "left"},
             "min": eta_min, "max": eta_max, "interval": eta_step, "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
            {"type": "value", "name": "Voltage regulation (%)", "nameTextStyle": {"align": "right"},
             "min": reg_min, "max": reg_max, "interval": reg_step, "splitLine": {"show": False}},
        ],
        "series": [
            {"id": "efficiency", "name": "Efficiency", "type": "line", "yAxisIndex": 0, "showSymbol": False,
             "itemStyle": {"color": NO_LOAD_COLOUR}, "lineStyle": {"width": 2},
             "data": [[x, y] for x, y in zip(x_pct, efficiency, strict=True) if x >= 20.0]},
            {"id": "regulation", "name": "Voltage regulation", "type": "line", "yAxisIndex": 1, "showSymbol": False,
             "itemStyle": {"color": REGULATION_COLOUR}, "lineStyle": {"width": 2, "type": "dashed"},
             "data": [[x, y] for x, y in zip(x_pct, regulation, strict=True)]},
        ],
    }
