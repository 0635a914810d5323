"""Chart options as plain data (JSON-ready dicts for ECharts), built from service results.

Functions here are pure: no I/O, no templates; ``static/js/charts.js`` draws what they return.
"""

from __future__ import annotations

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
