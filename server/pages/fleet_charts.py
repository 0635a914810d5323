"""Chart options for the installed fleet (JSON-ready dicts for ECharts): a Pareto of the annual loss
cost by group, and each group's loss energy split into no-load and load.

Pure functions over service results, like ``server.pages.charts``; ``static/js/charts.js`` draws them.
"""

from __future__ import annotations

from typing import Any

from server import schemas
from server.pages.charts import FONT, GRID_COLOUR, LOAD_COLOUR, NO_LOAD_COLOUR, TEXT_COLOUR

COST_COLOUR = "#1f6b76"
CUMULATIVE_COLOUR = "#a3262a"
# More bars than this are unreadable; the rest are drawn as one "other" bar at the end.
MAX_BARS = 20


def top_groups(groups: list[schemas.FleetGroupOut], top: int = MAX_BARS) -> list[schemas.FleetGroupOut]:
    """The groups largest loss cost first, the ones beyond ``top`` summed into one last group
    named "Other (n groups)". ``groups`` come sorted by loss cost, largest first."""
    ordered = sorted(groups, key=lambda g: g.loss_cost_per_year, reverse=True)
    if len(ordered) <= top:
        return ordered
    head, rest = ordered[: top - 1], ordered[top - 1:]
    other = schemas.FleetGroupOut(
        group=f"Other ({len(rest)} groups)",
        units=sum(g.units for g in rest),
        no_load_energy_kwh_per_year=sum(g.no_load_energy_kwh_per_year for g in rest),
        load_energy_kwh_per_year=sum(g.load_energy_kwh_per_year for g in rest),
        loss_cost_per_year=sum(g.loss_cost_per_year for g in rest),
        co2_t_per_year=sum(g.co2_t_per_year for g in rest),
        units_with_estimated_losses=sum(g.units_with_estimated_losses for g in rest),
    )
    return head + [other]


def _frame(labels: list[str]) -> dict[str, Any]:
    return {
        "animation": False,
        "textStyle": {"color": TEXT_COLOUR, "fontFamily": FONT, "fontSize": 13},
        "tooltip": {"trigger": "axis", "axisPointer": {"type": "shadow"}},
        "legend": {"top": 0, "left": 0, "itemWidth": 14, "itemHeight": 10, "textStyle": {"fontSize": 13}},
        "grid": {"left": 72, "right": 64, "top": 48, "bottom": 92 if len(labels) > 6 else 48},
        "xAxis": {
            "type": "category",
            "data": labels,
            "axisTick": {"show": False},
            "axisLabel": {"interval": 0, "rotate": 35 if len(labels) > 6 else 0, "width": 110, "overflow": "truncate"},
        },
    }


def pareto_chart(groups: list[schemas.FleetGroupOut], currency: str) -> dict[str, Any]:
    """Bars of the annual loss cost of each group, largest first, and a line of the cumulative
    share of the whole fleet's loss cost [%] on the right axis (reaching 100 % at the last bar).

    ``groups`` as ``top_groups`` returns them; costs rounded to whole currency units, shares to 0.1 %.
    Series ids: ``loss-cost`` and ``cumulative``.
    """
    labels = [g.group for g in groups]
    costs = [g.loss_cost_per_year for g in groups]
    total = sum(costs)
    running, cumulative = 0.0, []
    for cost in costs:
        running += cost
        cumulative.append(round(100.0 * running / total, 1) if total > 0 else 0.0)
    return _frame(labels) | {
        "yAxis": [
            {"type": "value", "name": f"Loss cost ({currency} a year)", "nameTextStyle": {"align": "left"}, "min": 0,
             "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
            {"type": "value", "name": "Cumulative (%)", "nameTextStyle": {"align": "right"}, "min": 0, "max": 100,
             "interval": 20, "splitLine": {"show": False}},
        ],
        "series": [
            {"id": "loss-cost", "name": "Annual loss cost", "type": "bar", "yAxisIndex": 0, "barMaxWidth": 40,
             "itemStyle": {"color": COST_COLOUR}, "data": [round(c) for c in costs]},
            {"id": "cumulative", "name": "Cumulative share", "type": "line", "yAxisIndex": 1, "symbolSize": 6,
             "itemStyle": {"color": CUMULATIVE_COLOUR}, "lineStyle": {"width": 2}, "data": cumulative},
        ],
    }


def loss_split_chart(groups: list[schemas.FleetGroupOut]) -> dict[str, Any]:
    """Stacked bars of each group's annual loss energy [MWh], no-load below and load above, in the
    Pareto's order. Energies rounded to 0.1 MWh. Series ids: ``no-load`` and ``load``."""
    labels = [g.group for g in groups]
    return _frame(labels) | {
        "yAxis": {"type": "value", "name": "Loss energy (MWh a year)", "nameTextStyle": {"align": "left"}, "min": 0,
                  "splitLine": {"lineStyle": {"color": GRID_COLOUR}}},
        "series": [
            {"id": "no-load", "name": "No-load loss", "type": "bar", "stack": "energy", "barMaxWidth": 40,
             "itemStyle": {"color": NO_LOAD_COLOUR},
             "data": [round(g.no_load_energy_kwh_per_year / 1000, 1) for g in groups]},
            {"id": "load", "name": "Load loss", "type": "bar", "stack": "energy", "barMaxWidth": 40,
             "itemStyle": {"color": LOAD_COLOUR},
             "data": [round(g.load_energy_kwh_per_year / 1000, 1) for g in groups]},
        ],
    }
