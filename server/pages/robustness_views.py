"""What "How sure is the ranking?" shows: the break-even rates, the rate map, the tornado and the
Monte Carlo of one lot, their forms (flat boxes to the robustness schemas and back) and charts.

Nothing here writes; the form helpers are pure and tested on their own.
"""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import Field, ValidationError
from sqlalchemy.orm import Session

from server import schemas
from server.pages.basis_form import input_label, method_boxes
from server.pages.forms import FormValues, plain_message
from server.pages.robustness_charts import rate_map_chart, toc_band_chart, tornado_chart, win_probability_chart
from server.pages.templating import fmt_plain, input_value
from server.services import pages_robustness
from server.services import robustness as service

# The inputs the tornado and the Monte Carlo forms move, in the order they show them.
MOVED_INPUTS = ("energy_price_per_kwh", "energy_escalation_pct", "discount_rate_pct", "years", "peak_load_pu",
                "load_growth_pct", "loss_factor", "capacity_cost_per_kw_year")
RATE_MAP_BOXES = ("no_load_rate_min", "no_load_rate_max", "load_rate_min", "load_rate_max", "steps")
RATE_MAP_STEPS = 60
DISTRIBUTIONS = [("fixed", "Fixed"), ("uniform", "Uniform"), ("triangular", "Triangular"), ("normal", "Normal")]
# The boxes each distribution reads, in the order the domain names them.
DISTRIBUTION_BOXES = {"fixed": (), "uniform": ("low", "high"), "triangular": ("low", "mode", "high"),
                      "normal": ("mean", "sd", "low", "high")}
MONTE_CARLO_BOXES = ("low", "mode", "high", "mean", "sd")
MONTE_CARLO_DRAWS = 10_000


class RateMapForm(schemas.RateMapIn):
    """The rate map as the page asks for it: at most 120 x 120 cells, so the page stays light."""

    steps: Annotated[int, Field(ge=5, le=120)] = RATE_MAP_STEPS


def _shown(value: float) -> str:
    """A default for a box: six significant digits, no float noise (0.064, not 0.06400000000000001)."""
    return input_value(float(f"{value:.6g}"))


def input_wording(currency: str) -> dict[str, tuple[str, str]]:
    """Label and unit of every input the tornado and the Monte Carlo can move, as the cost basis
    editor words them."""
    return {box.name: (box.label, box.unit) for box in method_boxes("present_worth", currency)}


def shown_value(value: float, unit: str) -> str:
    """An input's value with its unit, for tables and tooltips ("6 % a year", "0.08 EUR/kWh"); a
    fraction's "0 to 1" is a range, not a unit, and is left out."""
    unit = "" if unit == "0 to 1" else unit
    return f"{fmt_plain(float(f'{value:.6g}'))} {unit}".strip()


# --- the rate map ---------------------------------------------------------------------------------

def rate_map_request(form: FormValues) -> tuple[RateMapForm | None, dict[str, str]]:
    """The rate map form as the service takes it, or the messages beside its boxes. An empty range
    box takes the service's default end."""
    data = {name: form[name] for name in RATE_MAP_BOXES if form.get(name, "") != ""}
    try:
        request = RateMapForm.model_validate(data)
    except ValidationError as exc:
        return None, _errors(exc)
    errors = {}
    for axis in ("no_load_rate", "load_rate"):
        low, high = getattr(request, f"{axis}_min"), getattr(request, f"{axis}_max")
        if low is not None and high is not None and high <= low:
            errors[f"{axis}_max"] = "must be more than the lowest rate"
    return (None, errors) if errors else (request, {})


def _errors(exc: ValidationError, boxes: dict[tuple[Any, ...], str] | None = None) -> dict[str, str]:
    """The first message for each box; ``boxes`` maps a schema location to a box name."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = tuple(error.get("loc", ()))
        name = (boxes or {}).get(loc) or (str(loc[-1]) if loc else "form")
        errors.setdefault(name, plain_message(error))
    return errors


# --- the tornado ----------------------------------------------------------------------------------

def _allowed(name: str, value: float) -> float:
    """``value`` moved into the input's allowed range, as the tornado clips it."""
    return service.input_limits()[name].clip(value)


def tornado_defaults(base: dict[str, float]) -> dict[str, str]:
    """The low and high box of each moved input, as the service moves an input left out
    (``robustness.default_ranges``: rates of interest 2 points either way, years and other
    inputs 20 %), kept inside the input's allowed range, so that a box never offers a value
    the cost basis form would refuse. An input at zero gets empty boxes (the service leaves it
    out)."""
    ranges = service.default_ranges(base)
    form: dict[str, str] = {}
    for name in MOVED_INPUTS:
        if name not in ranges:
            form[f"{name}_low"] = form[f"{name}_high"] = ""
            continue
        low, high = (_allowed(name, value) for value in ranges[name])
        form[f"{name}_low"], form[f"{name}_high"] = _shown(low), _shown(high)
    return form


def error_key(field: str) -> str:
    """Where a service refusal goes on the page: the box it names (``years``,
    ``ranges.years.low``, ``inputs.discount_rate_pct.sd``), else, for an input without a box,
    its label (the form's list of errors shows the key as the label it is), else the field."""
    parts = field.removeprefix("ranges.").removeprefix("inputs.").split(".")
    name = parts[0]
    if name not in service.SENSITIVITY_INPUTS:
        return field
    if name not in MOVED_INPUTS:
        return input_label(name)
    box = parts[1] if len(parts) > 1 else ("low" if not field.startswith("inputs.") else "dist")
    return f"{name}_{box}"


def tornado_boxes() -> dict[str, str]:
    """The box (or label) a service refusal naming an input of the tornado belongs beside."""
    names = [*service.SENSITIVITY_INPUTS, *(f"ranges.{n}.{side}" for n in MOVED_INPUTS for side in ("low", "high"))]
    return {name: error_key(name) for name in names}


def tornado_request(form: FormValues) -> tuple[schemas.TornadoIn | None, dict[str, str]]:
    """The tornado form as the service takes it: each input with both boxes filled; one with both
    empty is moved as the service moves inputs left out. Each input is checked on its own, so
    that every bad box gets its message at once."""
    ranges: dict[str, list[float]] = {}
    errors: dict[str, str] = {}
    for name in MOVED_INPUTS:
        low, high = form.get(f"{name}_low", ""), form.get(f"{name}_high", "")
        if low == high == "":
            continue
        if "" in (low, high):
            errors[f"{name}_{'low' if low == '' else 'high'}"] = "fill this in, or empty both boxes of this input"
            continue
        try:
            pair = schemas.TornadoIn.model_validate({"ranges": {name: [low, high]}}).ranges[name]
        except ValidationError as exc:
            errors |= _errors(exc, {("ranges", name, 0): f"{name}_low", ("ranges", name, 1): f"{name}_high"})
            continue
        found = _range_errors(name, pair[0], pair[1])
        errors |= found
        if not found:
            ranges[name] = pair
    if errors:
        return None, errors
    return schemas.TornadoIn(ranges=ranges), {}


def _range_errors(name: str, low: float, high: float) -> dict[str, str]:
    errors: dict[str, str] = {}
    if name == "years":
        for side, value in (("low", low), ("high", high)):
            if not float(value).is_integer() or value < 1:
                errors.setdefault(f"years_{side}", "must be a whole number of years, 1 or more")
    if high < low:
        errors.setdefault(f"{name}_high", "must be at least the low value")
    return errors


def clip_notes(row: schemas.TornadoRowOut, label: str, unit: str) -> dict[str, str]:
    """What the tornado says about a value it moved into the input's allowed range, by side
    ("Cooling in service capped at 8,760 hours a year"), in the page's words and units."""
    notes = {}
    if row.low_clipped:
        limit = service.input_limits().get(row.input)
        if limit is not None and limit.low_open:
            notes["low"] = f"{label} raised to just above {shown_value(limit.low, unit)}"
        else:
            notes["low"] = f"{label} raised to {shown_value(row.low_value, unit)}"
    if row.high_clipped:
        notes["high"] = f"{label} capped at {shown_value(row.high_value, unit)}"
    return notes


def tornado_rows(tornado: schemas.TornadoOut, wording: dict[str, tuple[str, str]],
                 bidders: dict[int, str]) -> list[dict[str, Any]]:
    """The tornado's rows for the table: label, values with units, margins, who leads, and what
    was clipped to the input's allowed range."""
    rows = []
    for row in tornado.rows:
        label, unit = wording.get(row.input, (input_label(row.input), ""))
        rows.append({
            "row": row, "label": label, "unit": unit,
            "base": shown_value(row.base_value, unit),
            "low": shown_value(row.low_value, unit),
            "high": shown_value(row.high_value, unit),
            "clipped": clip_notes(row, label, unit),
            "leader_low": bidders.get(row.leader_low_offer_id, str(row.leader_low_offer_id)),
            "leader_high": bidders.get(row.leader_high_offer_id, str(row.leader_high_offer_id)),
        })
    return rows


# --- the Monte Carlo ------------------------------------------------------------------------------

def monte_carlo_defaults(base: dict[str, float]) -> dict[str, str]:
    """The Monte Carlo form as first shown: the energy price triangular 25 % either side of the
    basis, the discount rate uniform 2 points either side, the load growth uniform 1 point either
    side, the other inputs fixed. Every input's boxes are filled (the tornado's range, the basis
    value, a quarter of the range as standard deviation), so that choosing another distribution
    needs no typing."""
    ranges = tornado_defaults(base)
    form = {"draws": str(MONTE_CARLO_DRAWS), "seed": "1"}
    for name in MOVED_INPUTS:
        value = base[name]
        low, high = ranges[f"{name}_low"], ranges[f"{name}_high"]
        drawn = {"energy_price_per_kwh": (value * 0.75, value * 1.25), "discount_rate_pct": (value - 2.0, value + 2.0),
                 "load_growth_pct": (value - 1.0, value + 1.0)}.get(name)
        if drawn:
            # Inside the input's allowed range, as every draw must be.
            low, high = (_shown(_allowed(name, end)) for end in drawn)
        spread = (float(high) - float(low)) / 4 if low and high else 0.0
        form |= {f"{name}_dist": {"energy_price_per_kwh": "triangular", "discount_rate_pct": "uniform",
                                  "load_growth_pct": "uniform"}.get(name, "fixed"),
                 f"{name}_low": low, f"{name}_high": high, f"{name}_mode": _shown(value),
                 f"{name}_mean": _shown(value), f"{name}_sd": _shown(spread) if spread > 0 else ""}
    return form


def _distribution_errors(name: str, dist: schemas.DistributionIn) -> dict[str, str]:
    """What the service would refuse about one distribution (``robustness.distribution_problems``:
    bounds inside the input's allowed range, low below high, and so on), beside its boxes."""
    return {error_key(field): message for field, message in service.distribution_problems({name: dist}).items()}


def monte_carlo_request(form: FormValues) -> tuple[schemas.MonteCarloIn | None, dict[str, str]]:
    """The Monte Carlo form as the service takes it: per input its distribution with only the
    boxes it reads (a fixed input holds the basis value and is left out), or the messages. The
    draws, the seed and each input are checked on their own, so every bad box shows at once."""
    errors: dict[str, str] = {}
    inputs: dict[str, schemas.DistributionIn] = {}
    for name in MOVED_INPUTS:
        dist = form.get(f"{name}_dist", "fixed")
        if dist == "fixed":
            continue
        boxes = {key: form.get(f"{name}_{key}", "") for key in DISTRIBUTION_BOXES.get(dist, ())}
        try:
            spec = schemas.DistributionIn.model_validate({"dist": dist} | boxes)
        except ValidationError as exc:
            errors |= _errors(exc, {(key,): f"{name}_{key}" for key in (*MONTE_CARLO_BOXES, "dist")})
            continue
        found = _distribution_errors(name, spec)
        errors |= found
        if not found:
            inputs[name] = spec
    try:
        request = schemas.MonteCarloIn.model_validate(
            {"draws": form.get("draws", ""), "seed": form.get("seed", ""), "inputs": inputs})
    except ValidationError as exc:
        return None, _errors(exc) | errors
    return (None, errors) if errors else (request, {})


def run_inputs(request: dict[str, Any], wording: dict[str, tuple[str, str]]) -> list[str]:
    """A run's distributions in words, one per moved input ("Discount rate: uniform, 4 to 8 % a year")."""
    out = []
    for name, spec in request.get("inputs", {}).items():
        label, unit = wording.get(name, (name, ""))
        dist = spec.get("dist")
        value = {key: fmt_plain(float(f"{spec[key]:.6g}")) for key in MONTE_CARLO_BOXES if spec.get(key) is not None}
        if dist == "uniform":
            text = f"uniform, {value['low']} to {value['high']}"
        elif dist == "triangular":
            text = f"triangular, {value['low']} to {value['high']}, most likely {value['mode']}"
        elif dist == "normal":
            text = (f"normal, mean {value['mean']}, standard deviation {value['sd']}, "
                    f"cut at {value['low']} and {value['high']}")
        else:
            text = f"fixed at {value['mode']}" if "mode" in value else "fixed at the basis value"
        out.append(f"{label}: {text} {unit}".rstrip())
    return out


def run_context(view: pages_robustness.RunView | None) -> dict[str, Any]:
    """A Monte Carlo run as its partial shows it: its place in the queue while it waits, progress while it runs,
    the results and charts once done."""
    context: dict[str, Any] = {"run": None, "run_currency": "", "run_draws": None, "run_ahead": 0, "cancelling": False,
                               "win_chart": None, "band_chart": None, "run_inputs": [], "send_start": False}
    if view is None:
        return context
    run = view.run
    context |= {"run": run, "run_currency": view.currency, "run_draws": view.request.get("draws"),
                "run_ahead": view.ahead, "cancelling": view.cancel_requested,
                "run_inputs": run_inputs(view.request, input_wording(view.currency))}
    if run.result is not None:
        context["win_chart"] = win_probability_chart(run.result)
        context["band_chart"] = toc_band_chart(run.result, view.currency)
    return context


# --- the page -------------------------------------------------------------------------------------

def page_context(
    session: Session,
    lot_id: int,
    *,
    rate_form: FormValues | None = None,
    tornado_form: FormValues | None = None,
    mc_form: FormValues | None = None,
    mc_errors: dict[str, str] | None = None,
    run_id: int | None = None,
    monte_carlo_only: bool = False,
) -> dict[str, Any]:
    """Everything the page shows. A form given is the one a person sent (its boxes shown as
    typed); the others start from their defaults. ``monte_carlo_only`` skips the rate map and
    the tornado (the Monte Carlo section alone shows neither)."""
    rate_in, rate_errors = rate_map_request(rate_form) if rate_form is not None else (RateMapForm(), {})
    tornado_in, tornado_errors = (tornado_request(tornado_form) if tornado_form is not None
                                  else (schemas.TornadoIn(), {}))
    if monte_carlo_only:
        rate_in = tornado_in = None
    page = pages_robustness.robustness_page(session, lot_id, rate_in, tornado_in, run_id, tornado_boxes())
    facts, be, base = page.facts, page.break_even, page.base_inputs
    wording = input_wording(facts.currency)
    bidders = ({be.leader_offer_id: be.leader_bidder} | {r.offer_id: r.bidder for r in be.rows}) if be else {}
    context: dict[str, Any] = {
        "facts": facts, "currency": facts.currency, "problem": page.problem, "break_even": be,
        "rivals": sorted(be.rows, key=lambda r: r.margin_now) if be else [], "bidders": bidders,
        "wording": wording, "moved_inputs": MOVED_INPUTS, "present_worth_problem": page.present_worth_problem,
        "base": base, "tornado_box_names": [f"{n}_{side}" for n in MOVED_INPUTS for side in ("low", "high")],
        "mc_box_names": ["draws", "seed"] + [f"{n}_{key}" for n in MOVED_INPUTS
                                             for key in ("dist", *MONTE_CARLO_BOXES)],
    }
    # The rate map: with no form sent, the boxes show the range the service chose.
    rate_map = page.rate_map
    if rate_form is None:
        rate_form = _rate_map_shown(rate_map) if rate_map else {}
    context |= {"rate_form": rate_form, "rate_errors": rate_errors | page.rate_map_errors, "rate_map": rate_map,
                "rate_chart": rate_map_chart(rate_map, facts.currency) if rate_map else None,
                "never_win": _never_win(rate_map)}
    # The tornado.
    tornado = page.tornado
    if tornado_form is None:
        tornado_form = tornado_defaults(base) if base else {}
    rows = tornado_rows(tornado, wording, bidders) if tornado else []
    context |= {"tornado_form": tornado_form, "tornado_errors": tornado_errors | page.tornado_errors,
                "tornado": tornado, "tornado_rows": rows,
                "tornado_held": [t["clipped"][side] for t in rows for side in ("low", "high") if side in t["clipped"]],
                "tornado_chart": _tornado_chart(tornado, wording, facts.currency) if tornado else None}
    # The Monte Carlo.
    if mc_form is None:
        mc_form = monte_carlo_defaults(base) if base else {}
    context |= {"mc_form": mc_form, "mc_errors": mc_errors or {}, "distributions": DISTRIBUTIONS}
    return context | run_context(page.run)


def _rate_map_shown(rate_map: schemas.RateMapOut) -> dict[str, str]:
    a, b = rate_map.no_load_rates, rate_map.load_rates
    return {"no_load_rate_min": _shown(a[0]), "no_load_rate_max": _shown(a[-1]), "load_rate_min": _shown(b[0]),
            "load_rate_max": _shown(b[-1]), "steps": str(len(a))}


def _tornado_chart(tornado: schemas.TornadoOut, wording: dict[str, tuple[str, str]], currency: str) -> dict[str, Any]:
    labels = {row.input: wording.get(row.input, (input_label(row.input), ""))[0] for row in tornado.rows}
    values = {}
    for row in tornado.rows:
        unit = wording.get(row.input, ("", ""))[1]
        low = shown_value(row.low_value, unit) + (", raised to the lowest allowed" if row.low_clipped else "")
        high = shown_value(row.high_value, unit) + (", capped at the highest allowed" if row.high_clipped else "")
        values[row.input] = (low, high)
    return tornado_chart(tornado, labels, values, currency)


def _never_win(rate_map: schemas.RateMapOut | None) -> list[str]:
    """Bidders of offers that win nowhere on the map."""
    if rate_map is None:
        return []
    winners = {w for line in rate_map.winners for w in line}
    return [bidder for offer_id, bidder in rate_map.offers.items() if offer_id not in winners]
