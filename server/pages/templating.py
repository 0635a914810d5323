"""The one Jinja environment of the pages, its number filters, and response helpers."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from fastapi import Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from server.pages import history

TEMPLATE_DIR = Path(__file__).resolve().parents[1] / "templates"
DASH = "\u2014"


def _who(request: Request) -> dict[str, Any]:
    """Who is looking, their form token, and what they may change (every template gets these)."""
    principal = getattr(request.state, "principal", None)
    return {
        "principal": principal,
        "csrf_token": (principal.csrf_token or "") if principal else "",
        "may_buy": bool(principal and principal.has_any({"buyer"})),
        "may_plan": bool(principal and principal.has_any({"planner"})),
        "may_approve": bool(principal and principal.has_any({"approver"})),
        "may_admin": bool(principal and principal.has_any({"admin"})),
    }


templates = Jinja2Templates(directory=TEMPLATE_DIR, context_processors=[_who])


def _finite(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def fmt_number(value: Any, decimals: int = 0) -> str:
    """Thousands separators and a fixed number of decimals; a dash for no value."""
    if not _finite(value):
        return DASH
    text = f"{value:,.{decimals}f}"
    return "0" if decimals == 0 and text == "-0" else text


def fmt_money(value: Any) -> str:
    """Prices and owning costs: whole currency units."""
    return fmt_number(value, 0)


def fmt_rate(value: Any) -> str:
    """Capitalisation rates per kW: one decimal."""
    return fmt_number(value, 1)


def fmt_pct(value: Any) -> str:
    """Efficiencies and other percentages: two decimals."""
    return fmt_number(value, 2)


def fmt_loss(value: Any) -> str:
    """Losses in W: whole watts with separators from 100 W up; below that up to four significant
    digits, so that a loss typed as 0.43 (kW in a W box) shows as 0.43, never as 0."""
    if not _finite(value):
        return DASH
    if abs(value) >= 100 or value == 0:
        return fmt_number(value, 0)
    rounded = float(f"{value:.4g}")
    return f"{rounded:.6f}".rstrip("0").rstrip(".")


def warnings_by_field(warnings: Any) -> dict[str, list[str]]:
    """An offer's warning messages grouped by the field they concern, for showing beside each value."""
    grouped: dict[str, list[str]] = {}
    for warning in warnings or []:
        grouped.setdefault(warning.field, []).append(warning.message)
    return grouped


def fmt_plain(value: Any) -> str:
    """A measured quantity as entered (20, 0.4, 11.5), with thousands separators."""
    if not _finite(value):
        return DASH
    if float(value).is_integer():
        return f"{value:,.0f}"
    return f"{value:,.6f}".rstrip("0").rstrip(".")


def input_value(value: Any) -> str:
    """A value for an <input>: text as typed, numbers without separators or float noise."""
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, float):
        return f"{value:.0f}" if value.is_integer() and abs(value) < 1e15 else repr(value)
    if isinstance(value, list):
        # A list box (an energy price path) shows one value per line.
        return "\n".join(input_value(v) for v in value)
    return str(value)


def differs(theirs: Any, mine: Any) -> bool:
    """Whether a stored value and a typed one differ (12500 and "12500.0" do not)."""
    a, b = input_value(theirs), input_value(mine)
    try:
        return float(a) != float(b)
    except ValueError:
        return a != b


def sentence(text: Any) -> str:
    """A message as a sentence: capital first letter, full stop at the end."""
    text = str(text).strip()
    if not text:
        return text
    text = text[0].upper() + text[1:]
    return text if text.endswith((".", "!", "?")) else text + "."


METHOD_NAMES = {
    "direct": "Direct rates",
    "present_worth": "Present worth",
    "fixed_charge_rate": "Fixed charge rate",
}
STATUS_NAMES = {"draft": "Draft", "evaluation": "Under evaluation", "awarded": "Awarded"}

templates.env.filters.update(
    number=fmt_number,
    money=fmt_money,
    rate=fmt_rate,
    pct=fmt_pct,
    plain=fmt_plain,
    loss=fmt_loss,
    warnings_by_field=warnings_by_field,
    input_value=input_value,
    sentence=sentence,
    method_name=lambda m: METHOD_NAMES.get(m, m),
    status_name=lambda s: STATUS_NAMES.get(s, s),
    utc=history.fmt_utc,
    iso_utc=history.iso_utc,
    object_name=history.object_name,
    action_name=history.action_name,
)
templates.env.globals.update(
    METHOD_NAMES=METHOD_NAMES,
    STATUS_NAMES=STATUS_NAMES,
    differs=differs,
    object_link=history.object_link,
    diff_rows=history.diff_rows,
)


def is_htmx(request: Request) -> bool:
    return request.headers.get("HX-Request") == "true"


def render(
    request: Request,
    template: str,
    context: dict[str, Any],
    status_code: int = 200,
    headers: dict[str, str] | None = None,
) -> HTMLResponse:
    return templates.TemplateResponse(request, template, context, status_code=status_code, headers=headers)


def page_or_partial(
    request: Request,
    page: str,
    partial: str,
    context: dict[str, Any],
    status_code: int = 200,
    headers: dict[str, str] | None = None,
) -> HTMLResponse:
    """The whole page for a browser, only the swapped fragment for htmx."""
    return render(request, partial if is_htmx(request) else page, context, status_code, headers)


def see_other(request: Request, url: str) -> Response:
    """After a successful post: 303 for a plain form; htmx gets told where to go instead,
    because it would follow a 303 itself and swap the whole page into its target."""
    if is_htmx(request):
        return Response(status_code=200, headers={"HX-Redirect": url})
    return RedirectResponse(url, status_code=303)


RANKING_CHANGED = {"HX-Trigger": "ranking-changed"}
