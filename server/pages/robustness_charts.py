"""Chart options for "How sure is the ranking?" (JSON-ready dicts for ECharts): the winner over a
grid of no-load and load rates with the tie lines and the current basis, the tornado of the
leader's margin, and the Monte Carlo's win probabilities and owning-cost bands.

Pure functions over service results, like ``server.pages.charts``; ``static/js/charts.js`` draws them.
"""

from __future__ import annotations

import math
from typing import Any

from server import schemas
from server.pages.charts import CURVE_COLOURS, FONT, GRID_COLOUR, LIMIT_COLOUR, TEXT_COLOUR
from server.pages.templating import fmt_money, fmt_number

LOW_COLOUR = "#56b4e9"
HIGH_COLOUR = "#d55e00"
MARKER_COLOUR = "#1d2530"
TIE_COLOUR = "#1d2530"
LEGEND_WIDTH_PX = 200
LABEL_WIDTH_PX = 190
# The Monte Carlo charts run the page's full width: room for a whole bidder's name.
WIDE_LABEL_WIDTH_PX = 240
# More cells than this make the page heavy for little gain: the tie lines are exact anyway.
MAX_CELLS = 120 * 120


def offer_colours(offer_ids: list[int]) -> dict[int, str]:
    """One colour per offer, the same on every chart of the page: by offer id, lowest first."""
    return {offer_id: CURVE_COLOURS[k % len(CURVE_COLOURS)] for k, offer_id in enumerate(sorted(offer_ids))}


def _frame() -> dict[str, Any]:
    return {"animation": False, "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13}}


def _nice_step(span: float, ticks: int = 6) -> float:
    """A step of 1, 2, 2.5 or 5 times a power of ten giving about ``ticks`` intervals over ``span``."""
    raw = max(span, 1e-9) / ticks
    power = 10.0 ** math.floor(math.log10(raw))
    return next(k * power for k in (1.0, 2.0, 2.5, 5.0, 10.0) if k * power >= raw)


def _axis_edges(values: list[float]) -> tuple[float, float]:
    """The outer edges of the cells centred on evenly spaced ``values``."""
    step = (values[-1] - values[0]) / (len(values) - 1) if len(values) > 1 else max(abs(values[0]), 1.0)
    return values[0] - step / 2, values[-1] + step / 2


def rate_map_chart(rate_map: schemas.RateMapOut, currency: str) -> dict[str, Any]:
    """The offer with the lowest TOC in each cell of a grid of no-load rate A (across) and load
    rate B (up), one colour per offer with the bidders named in the legend; the tie lines between
    neighbouring winners; and the current basis as a marked point.

    The cells are a heatmap on hidden category axes; the tie lines and the marker sit on value
    axes laid over the same rectangle, reaching from the first cell's outer edge to the last's,
    so that a rate lands in the middle of its cell. Series ids: ``winners``, ``tie-lines`` and
    ``current-basis`` (data [[A, B]] in currency/kW).
    """
    a, b = rate_map.no_load_rates, rate_map.load_rates
    if len(a) * len(b) > MAX_CELLS:
        raise ValueError(f"a rate map of {len(a)} x {len(b)} cells is more than {MAX_CELLS} cells")
    ids = list(rate_map.offers)
    colours = offer_colours(ids)
    place = {offer_id: k for k, offer_id in enumerate(ids)}
    cells = [[col, row, place[w]] for row, line in enumerate(rate_map.winners) for col, w in enumerate(line)]
    winners = [offer_id for offer_id in ids if any(offer_id in line for line in rate_map.winners)]
    a_lo, a_hi = _axis_edges(a)
    b_lo, b_hi = _axis_edges(b)
    grid = {"left": 84, "right": LEGEND_WIDTH_PX + 48, "top": 16, "bottom": 56}
    hidden = {"type": "category", "show": False}
    unit = f"{currency}/kW"
    value_axis = {"type": "value", "nameLocation": "middle", "splitLine": {"show": False},
                  "axisLabel": {"showMinLabel": False, "showMaxLabel": False}}
    current = rate_map.current
    ties = []
    for line in rate_map.tie_lines:
        first, second = (rate_map.offers.get(o, str(o)) for o in line["offers"])
        ties.append({"name": f"{first} and {second} tie", "coords": [line["start"], line["end"]]})
    return _frame() | {
        "tooltip": {"trigger": "item"},
        "grid": [grid, dict(grid)],
        "xAxis": [
            hidden | {"gridIndex": 0, "data": [round(v, 1) for v in a]},
            value_axis | {"gridIndex": 1, "min": a_lo, "max": a_hi, "name": f"A, no-load loss rate ({unit})",
                          "nameGap": 30},
        ],
        "yAxis": [
            hidden | {"gridIndex": 0, "data": [round(v, 1) for v in b]},
            value_axis | {"gridIndex": 1, "min": b_lo, "max": b_hi, "name": f"B, load loss rate ({unit})",
                          "nameGap": 64},
        ],
        # Beside the map, one bidder a line; only the offers that win somewhere in it.
        "visualMap": {
            "type": "piecewise", "dimension": 2, "seriesIndex": 0, "orient": "vertical", "right": 0, "top": 16,
            "itemWidth": 16, "itemHeight": 12, "textStyle": {"fontSize": 13, "width": LEGEND_WIDTH_PX,
                                                            "overflow": "truncate"},
            "pieces": [{"value": place[o], "label": rate_map.offers[o], "color": colours[o]} for o in winners],
        },
        "series": [
            {"id": "winners", "name": "Lowest total owning cost", "type": "heatmap", "xAxisIndex": 0, "yAxisIndex": 0,
             "silent": True, "progressive": 0, "data": cells},
            {"id": "tie-lines", "name": "Tie lines", "type": "lines", "coordinateSystem": "cartesian2d",
             "xAxisIndex": 1, "yAxisIndex": 1, "polyline": False, "z": 3,
             "lineStyle": {"color": TIE_COLOUR, "width": 1.5, "opacity": 0.8}, "data": ties},
            {"id": "current-basis", "name": "Current basis", "type": "scatter", "xAxisIndex": 1, "yAxisIndex": 1,
             "z": 4, "symbol": "diamond", "symbolSize": 16,
             "itemStyle": {"color": "#ffffff", "borderColor": MARKER_COLOUR, "borderWidth": 2.5},
             "label": {"show": True, "position": "right", "color": MARKER_COLOUR, "fontWeight": 600,
                       "backgroundColor": "rgba(255, 255, 255, 0.85)", "padding": [2, 4],
                       "formatter": "Current basis"},
             "tooltip": {"formatter": f"Current basis: A {fmt_number(current['no_load_rate_per_kw'], 1)}, "
                                      f"B {fmt_number(current['load_rate_per_kw'], 1)} {unit}"},
             "data": [[current["no_load_rate_per_kw"], current["load_rate_per_kw"]]]},
        ],
    }


def tornado_chart(tornado: schemas.TornadoOut, labels: dict[str, str], values: dict[str, tuple[str, str]],
                  currency: str) -> dict[str, Any]:
    """Per input, the change in the leader's margin over the nearest rival when the input is at
    its low and at its high value, the others at their base values; largest swing at the top.

    Bars are measured from the base margin (0 on the axis). When some input lets a rival
    overtake, a dashed line marks where the margin reaches zero (at minus the base margin).
    ``labels`` names each input; ``values`` gives its low and high value as text (with unit) for
    the tooltips. An input whose low or high value was moved into its allowed range is named
    "(held at its limit)". Margins rounded to whole currency units. Series ids: ``low`` and ``high``.
    """
    base = tornado.rows[0].margin_base if tornado.rows else 0.0
    names = [labels.get(r.input, r.input) + (" (held at its limit)" if r.low_clipped or r.high_clipped else "")
             for r in tornado.rows]

    def bars(side: str, colour: str) -> dict[str, Any]:
        data = []
        for row, name in zip(tornado.rows, names, strict=True):
            margin = getattr(row, f"margin_{side}")
            shown = values.get(row.input, ("", ""))[0 if side == "low" else 1]
            data.append({"value": round(margin - base),
                         "tooltip": {"formatter": f"{name} at {shown}: margin {fmt_money(margin)} {currency}"}})
        return {"id": side, "name": f"Input at its {side} value", "type": "bar", "barGap": "15%",
                "barCategoryGap": "35%", "barMaxWidth": 16, "itemStyle": {"color": colour}, "data": data}

    low, high = bars("low", LOW_COLOUR), bars("high", HIGH_COLOUR)
    marks: list[dict[str, Any]] = [{"xAxis": 0, "lineStyle": {"color": MARKER_COLOUR, "type": "solid", "width": 1.5},
                                    "label": {"formatter": f"base margin {fmt_money(base)} {currency}",
                                              "position": "start", "align": "left", "padding": [0, 0, 0, 6]}}]
    if any(r.leader_changes for r in tornado.rows):
        marks.append({"xAxis": round(-base), "lineStyle": {"color": LIMIT_COLOUR, "type": "dashed", "width": 1.5},
                      "label": {"formatter": "a rival leads", "position": "start", "align": "right",
                                "padding": [0, 6, 0, 0], "color": LIMIT_COLOUR}})
    # The category axis runs top to bottom, so a line's start is at the top, clear of the axis name;
    # the two labels lean away from each other, the rival's line being always left of the base.
    low["markLine"] = {"symbol": "none", "silent": True, "data": marks}
    return _frame() | {
        "tooltip": {"trigger": "item"},
        "legend": {"top": 0, "left": 0, "itemWidth": 14, "itemHeight": 10, "textStyle": {"fontSize": 13}},
        "grid": {"left": LABEL_WIDTH_PX + 16, "right": 40, "top": 52, "bottom": 48},
        "xAxis": {"type": "value", "name": f"Change in the leader's margin from its base ({currency} per unit)",
                  "nameLocation": "middle", "nameGap": 28, "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
        "yAxis": {"type": "category", "inverse": True, "data": names, "axisTick": {"show": False},
                  "axisLabel": {"width": LABEL_WIDTH_PX, "overflow": "truncate", "fontSize": 13}},
        "series": [low, high],
    }


def win_probability_chart(result: schemas.MonteCarloOut) -> dict[str, Any]:
    """Horizontal bars: each offer's share of the draws in which it has the lowest TOC [%], in
    the result's order (most wins first), rounded to 0.1 %. Series id: ``win-probability``."""
    colours = offer_colours([r.offer_id for r in result.rows])
    return _frame() | {
        "tooltip": {"trigger": "item", "formatter": "{b}: {c} %"},
        "grid": {"left": WIDE_LABEL_WIDTH_PX + 16, "right": 56, "top": 12, "bottom": 44},
        "xAxis": {"type": "value", "min": 0, "max": 100, "interval": 20, "name": "Win probability (%)",
                  "nameLocation": "middle", "nameGap": 28, "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
        "yAxis": {"type": "category", "inverse": True, "data": [r.bidder for r in result.rows],
                  "axisTick": {"show": False},
                  "axisLabel": {"width": WIDE_LABEL_WIDTH_PX, "overflow": "truncate", "fontSize": 13}},
        "series": [{
            "id": "win-probability", "name": "Win probability", "type": "bar", "barMaxWidth": 24,
            "label": {"show": True, "position": "right", "formatter": "{c} %"},
            "data": [{"value": round(100.0 * r.win_probability, 1), "itemStyle": {"color": colours[r.offer_id]}}
                     for r in result.rows],
        }],
    }


def toc_band_chart(result: schemas.MonteCarloOut, currency: str) -> dict[str, Any]:
    """Per offer, a band from the 5th to the 95th percentile of its TOC per unit and a marker at
    the median, in the result's order. The band is a bar stacked on a transparent one reaching
    the 5th percentile; the axis fits the bands, not zero. Whole currency units.
    Series ids: ``to-p5`` (transparent), ``band`` and ``median``."""
    colours = offer_colours([r.offer_id for r in result.rows])
    rows = result.rows
    low = min((r.toc_p5 for r in rows), default=0.0)
    high = max((r.toc_p95 for r in rows), default=0.0)
    # Whole steps a little beyond the bands: the axis fits the bands, not zero.
    step = _nice_step(max(high - low, 0.01 * abs(high), 1.0))
    axis_min = round(math.floor(low / step - 0.25) * step, 9)
    axis_max = round(math.ceil(high / step + 0.25) * step, 9)
    band_tips = [f"{r.bidder}: 5 % {fmt_money(r.toc_p5)}, median {fmt_money(r.toc_p50)}, "
                 f"95 % {fmt_money(r.toc_p95)} {currency}" for r in rows]
    return _frame() | {
        "tooltip": {"trigger": "item"},
        "legend": {"top": 0, "left": 0, "itemWidth": 14, "itemHeight": 10, "textStyle": {"fontSize": 13},
                   "data": ["5th to 95th percentile", "Median"]},
        "grid": {"left": WIDE_LABEL_WIDTH_PX + 16, "right": 40, "top": 40, "bottom": 44},
        "xAxis": {"type": "value", "scale": True, "min": axis_min, "max": axis_max, "interval": step,
                  "name": f"Total owning cost per unit ({currency})", "nameLocation": "middle", "nameGap": 28,
                  "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
        "yAxis": {"type": "category", "inverse": True, "data": [r.bidder for r in rows], "axisTick": {"show": False},
                  "axisLabel": {"width": WIDE_LABEL_WIDTH_PX, "overflow": "truncate", "fontSize": 13}},
        "series": [
            {"id": "to-p5", "name": "to-p5", "type": "bar", "stack": "band", "silent": True, "barMaxWidth": 22,
             "itemStyle": {"color": "transparent"}, "tooltip": {"show": False},
             "data": [round(r.toc_p5) for r in rows]},
            {"id": "band", "name": "5th to 95th percentile", "type": "bar", "stack": "band", "barMaxWidth": 22,
             "itemStyle": {"color": "#9aa5b1"},
             "data": [{"value": round(r.toc_p95) - round(r.toc_p5),
                       "itemStyle": {"color": colours[r.offer_id], "opacity": 0.55},
                       "tooltip": {"formatter": tip}} for r, tip in zip(rows, band_tips, strict=True)]},
            {"id": "median", "name": "Median", "type": "scatter", "symbol": "diamond", "symbolSize": 13, "z": 4,
             "itemStyle": {"color": MARKER_COLOUR},
             "data": [{"value": [round(r.toc_p50), k], "tooltip": {"formatter": tip}}
                      for k, (r, tip) in enumerate(zip(rows, band_tips, strict=True))]},
        ],
    }
