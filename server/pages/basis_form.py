"""The cost basis form: each method's boxes (named exactly as the schemas) in plain words."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pydantic_core import PydanticUndefined

from server import schemas

# The words of the boxes live with the service: the API's warnings name the inputs as the boxes do.
from server.services.cost_bases import INPUT_WORDING, input_label


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
        label, unit, hint = INPUT_WORDING.get(name, (input_label(name), "", ""))
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


def chosen_method(value: str | None, fallback: str = "direct") -> str:
    return value if value in schemas.METHOD_MODELS else fallback
