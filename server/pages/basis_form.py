"""The cost basis form: each method's boxes (named exactly as the schemas) in plain words."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pydantic_core import PydanticUndefined

from server import schemas

# Label, unit and hint of every method input; "{cur}" becomes the basis's currency.
_WORDING: dict[str, tuple[str, str, str]] = {
    "no_load_rate_per_kw": ("A, no-load loss rate", "{cur}/kW", ""),
    "load_rate_per_kw": ("B, load loss rate", "{cur}/kW", ""),
    "aux_rate_per_kw": ("C, auxiliary loss rate", "{cur}/kW", ""),
    "energy_price_per_kwh": ("Energy price", "{cur}/kWh", "In year 1."),
    "energy_escalation_pct": ("Energy price escalation e", "% a year", ""),
    "capacity_cost_per_kw_year": ("Capacity cost", "{cur}/kW a year", ""),
    "discount_rate_pct": ("Discount rate", "% a year", ""),
    "years": ("Evaluation period n", "years", ""),
    "peak_load_pu": ("Peak load", "per unit", "Of the rating, in year 1."),
    "load_growth_pct": ("Peak load growth g", "% a year", ""),
    "loss_factor": ("Loss factor", "0 to 1", ""),
    "responsibility_factor": ("Responsibility factor", "0 to 1", "Share of the peak that falls at the system peak."),
    "cooling_hours_per_year": ("Cooling in service", "hours a year", ""),
    "system_capacity_cost_per_kw_year": ("System capacity cost", "{cur}/kW a year", ""),
    "energy_cost_per_kwh": ("Energy cost", "{cur}/kWh", ""),
    "fixed_charge_rate_pct": ("Fixed charge rate", "% a year", ""),
    "energy_price_path_per_kwh": (
        "Energy price path", "{cur}/kWh", "Optional: one price for each year 1 to n, one per line or separated by "
        "commas. It replaces the price and its escalation.",
    ),
    "carbon_price_per_t": ("Carbon price", "{cur}/t CO\u2082", "Added to every year's energy price."),
    "emission_factor_t_per_mwh": ("Grid emission factor", "t CO\u2082/MWh", "Of the energy that covers the losses."),
}

@dataclass(frozen=True)
class InputBox:
    name: str
    label: str
    unit: str
    hint: str
    required: bool
    default: Any
    kind: str = "decimal"  # as the field macro takes it: "decimal", "numeric" or "textarea"


def method_boxes(method: str, currency: str = "") -> list[InputBox]:
    """The input boxes of one method, in schema order, skipping the method itself."""
    model = schemas.METHOD_MODELS[method]
    boxes = []
    for name, info in model.model_fields.items():
        if name == "method":
            continue
        label, unit, hint = _WORDING.get(name, (input_label(name), "", ""))
        # Without a currency yet, "/kW" alone still says what the number is.
        unit = unit.format(cur=currency) if currency else unit.replace("{cur}", "").lstrip()
        default = None if info.default is PydanticUndefined else info.default
        kind = "numeric" if name == "years" else "textarea" if name in _LISTS else "decimal"
        boxes.append(InputBox(name, label, unit, hint, info.is_required(), default, kind))
    return boxes


# Inputs that take a list of numbers (a textarea, one number per line or comma-separated).
_LISTS = {"energy_price_path_per_kwh"}


def price_path_coverage(values: dict[str, Any]) -> dict[str, Any] | None:
    """How many years an explicit energy price path covers against the evaluation period, for
    the live preview; None when no path is given."""
    path = values.get("energy_price_path_per_kwh")
    if values.get("method") != "present_worth" or not isinstance(path, list) or not path:
        return None
    years = values.get("years")
    try:
        n = int(str(years))
    except ValueError:
        n = None
    return {"prices": len(path), "years": n, "matches": n == len(path)}


def input_label(name: str) -> str:
    return _WORDING[name][0] if name in _WORDING else name.replace("_", " ").capitalize()


def chosen_method(value: str | None, fallback: str = "direct") -> str:
    return value if value in schemas.METHOD_MODELS else fallback
