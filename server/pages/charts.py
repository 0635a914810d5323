"""Chart options as plain data (JSON-ready dicts for ECharts), built from service results.

Functions here are pure: no I/O, no templates; ``static/js/charts.js`` draws what they return.
"""

from __future__ import annotations

import math
from typing import Any

from server import schemas

# Calm, distinguishable in print and for the common colour-vision deficiencies.
PRICE_COLOUR = "#52606d"
NO_LOAD_COLOUR = "#2a7f8e"
LOAD_COLOUR = "#d4912a"
AUX_COLOUR = "#8a6bb1"
TEXT_COLOUR = "#3a4450"
# Named, not "inherit": the chart measures its labels with this font before drawing them.
FONT = 'system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif'
GRID_COLOUR = "#e4e7eb"
LABEL_WIDTH_PX = 190

_PARTS = (
    ("Price", "unit_price", PRICE_COLOUR),
    ("Capitalised no-load loss", "capitalised_no_load", NO_LOAD_COLOUR),
    ("Capitalised load loss", "capitalised_load", LOAD_COLOUR),
    ("Capitalised auxiliary loss", "capitalised_aux", AUX_COLOUR),
)


def toc_breakdown_chart(ranking: schemas.RankingOut) -> dict[str, Any]:
    """Stacked horizontal bars: each offer's total owning cost per unit, split into its parts.

    Offers run top to bottom in rank order; values are rounded to whole currency units.
    """
    labels = [f"{row.rank}. {row.bidder}" for row in ranking.rows]
    series = [
        {
            "name": name,
            "type": "bar",
            "stack": "toc",
            "itemStyle": {"color": colour},
            "emphasis": {"focus": "series"},
            "barMaxWidth": 28,
            "data": [round(getattr(row, field)) for row in ranking.rows],
        }
        for name, field, colour in _PARTS
    ]
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "axis", "axisPointer": {"type": "shadow"}},
        "legend": {"top": 0, "left": 0, "itemWidth": 14, "itemHeight": 10, "textStyle": {"fontSize": 13}},
        # A fixed margin for the bidders' names: measured margins clip the longest name.
        "grid": {"left": LABEL_WIDTH_PX + 16, "right": 24, "top": 40, "bottom": 44},
        "xAxis": {
            "type": "value",
            "name": f"{ranking.currency} per unit",
            "nameLocation": "middle",
            "nameGap": 28,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
        "yAxis": {
            "type": "category",
            "inverse": True,
            "data": labels,
            "axisTick": {"show": False},
            "axisLabel": {"width": LABEL_WIDTH_PX, "overflow": "truncate", "fontSize": 13},
        },
        "series": series,
    }


# Okabe and Ito's palette first (told apart with the common colour-vision deficiencies), then calm greys.
CURVE_COLOURS = (
    "#0072b2", "#e69f00", "#009e73", "#cc79a7", "#56b4e9", "#d55e00",
    "#52606d", "#8a6bb1", "#2a7f8e", "#b08b00",
)
LIMIT_COLOUR = "#a3262a"
LEGEND_WIDTH_PX = 200
# Below a fifth of the rating every curve falls steeply to zero; the axis starts above that.
_SCALE_FROM_PU = 0.2


_STEPS_PCT = (0.05, 0.1, 0.2, 0.25, 0.5, 1.0, 2.0, 5.0)


def _efficiency_axis(curves: schemas.EfficiencyCurvesOut) -> tuple[float, float, float]:
    """The efficiency axis's ends and step [%]: the curves above a fifth of the rating and every
    limit, with a tenth of the span to spare, on whole steps (at most eight) and never above 100 %."""
    values = [
        eta for curve in curves.curves
        for k, eta in zip(curves.loading_pu, curve.efficiency_pct, strict=True) if k >= _SCALE_FROM_PU
    ]
    values += [p["efficiency_pct"] for p in curves.reference_points if p.get("efficiency_pct") is not None]
    if not values:
        return 95.0, 100.0, 1.0
    low, high = min(values), max(values)
    spare = max(0.1 * (high - low), 0.02)
    low, high = low - spare, high + spare
    step = next((s for s in _STEPS_PCT if (high - low) / s <= 8), _STEPS_PCT[-1])
    bottom = round(math.floor(low / step) * step, 3)
    top = round(min(100.0, math.ceil(high / step) * step), 3)
    return bottom, top, step


def efficiency_curves_chart(curves: schemas.EfficiencyCurvesOut) -> dict[str, Any]:
    """One line per offer: efficiency against loading from 0 to 150 % of the rating, with the
    loading of maximum efficiency marked on each line, and the limits the lot names: a minimum
    efficiency at its loading as a point, a minimum peak efficiency index as a dashed level.

    Each offer's series has the id ``offer-<offer id>``; the limits' ids start with ``limit-``.
    Loadings are in percent of the rating, efficiencies in percent, rounded to 0.001 %.
    """
    x_pct = [round(100.0 * k, 2) for k in curves.loading_pu]
    series: list[dict[str, Any]] = []
    for index, curve in enumerate(curves.curves):
        colour = CURVE_COLOURS[index % len(CURVE_COLOURS)]
        line: dict[str, Any] = {
            "id": f"offer-{curve.offer_id}",
            "name": curve.bidder,
            "type": "line",
            "showSymbol": False,
            "smooth": False,
            "itemStyle": {"color": colour},
            "lineStyle": {"width": 2},
            "emphasis": {"focus": "series"},
            # No load gives no efficiency worth drawing (0 %); the line starts at the next loading.
            "data": [[x, round(eta, 3)] for x, eta in zip(x_pct, curve.efficiency_pct, strict=True) if x > 0],
        }
        if curve.max_efficiency_loading_pu is not None and curve.max_efficiency_pct is not None:
            at_pct = round(100.0 * curve.max_efficiency_loading_pu, 1)
            line["markPoint"] = {
                "symbol": "circle",
                "symbolSize": 9,
                "itemStyle": {"color": colour, "borderColor": "#ffffff", "borderWidth": 1.5},
                "label": {"show": False},
                "data": [{
                    "name": f"Maximum efficiency {curve.max_efficiency_pct:.3f} % at {at_pct:g} % load",
                    "coord": [at_pct, round(curve.max_efficiency_pct, 3)],
                }],
            }
        series.append(line)
    for number, point in enumerate(curves.reference_points):
        value = round(point["efficiency_pct"], 3)
        if point.get("kind") == "min_efficiency":
            at_pct = round(100.0 * point["loading_pu"], 1)
            series.append({
                "id": f"limit-{number}",
                "name": f"Minimum efficiency, {point['table']}",
                "type": "scatter",
                "symbol": "triangle",
                "symbolSize": 13,
                "itemStyle": {"color": LIMIT_COLOUR},
                "label": {"show": True, "position": "bottom", "color": LIMIT_COLOUR,
                          "backgroundColor": "rgba(255, 255, 255, 0.85)", "padding": [2, 4],
                          "formatter": f"minimum {value:g} % at {at_pct:g} %"},
                "data": [[at_pct, value]],
            })
        else:
            series.append({
                "id": f"limit-{number}",
                "name": f"Minimum peak efficiency index, {point['table']}",
                "type": "line",
                "showSymbol": False,
                "itemStyle": {"color": LIMIT_COLOUR},
                "lineStyle": {"type": "dashed", "width": 1.5},
                "data": [
                    [x_pct[0], value],
                    {"value": [x_pct[-1], value],
                     "label": {"show": True, "position": "top", "align": "right", "color": LIMIT_COLOUR,
                               "formatter": f"minimum PEI {value:g} %"}},
                ],
            })
    low, high, step = _efficiency_axis(curves)
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "item"},
        # Beside the plot, one name a line: a row above it would wrap over the plot with many offers.
        "legend": {"type": "scroll", "orient": "vertical", "right": 0, "top": 16, "bottom": 16, "itemWidth": 18,
                   "itemHeight": 10, "textStyle": {"fontSize": 13, "width": LEGEND_WIDTH_PX, "overflow": "truncate"}},
        "grid": {"left": 64, "right": LEGEND_WIDTH_PX + 56, "top": 20, "bottom": 52},
        "xAxis": {
            "type": "value",
            "min": 0,
            "max": x_pct[-1] if x_pct else 150,
            "interval": 25,
            "name": "Loading (% of the rating)",
            "nameLocation": "middle",
            "nameGap": 30,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
        "yAxis": {
            "type": "value",
            "min": low,
            "max": high,
            "interval": step,
            "name": "Efficiency (%)",
            "nameLocation": "middle",
            "nameGap": 48,
            "splitLine": {"lineStyle": {"color": GRID_COLOUR}},
        },
        "series": series,
    }
