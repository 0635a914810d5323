"""Read-only gathering the robustness page needs beyond the shared services: the break-even
rates, the rate map and the tornado of one lot in one call, each with the plain reason it cannot
be drawn, the present-worth inputs the forms start from, and a Monte Carlo run with its lot."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from sqlalchemy import select
from sqlalchemy.orm import Session

from server import jobs, schemas
from server.errors import InvalidField
from server.services import robustness
from server.services.tenders import get_lot
from server.storage.models import MonteCarloRun

# Inputs the service gives in percent (API names); the rest keep their own units.
PCT_INPUTS = tuple(robustness.PCT_INPUTS)


@dataclass(frozen=True)
class LotFacts:
    """What the page says about the lot and the basis that prices it."""

    lot_id: int
    lot_name: str
    tender_id: int
    tender_reference: str
    tender_title: str
    currency: str
    basis_id: int
    basis_name: str
    basis_revision: int
    method: str


@dataclass(frozen=True)
class RunView:
    """A Monte Carlo run with what its schema leaves out: the request it ran (its distributions),
    whether a cancel was asked, how many queued jobs will be taken before it; and its lot's currency."""

    run: schemas.MonteCarloRunOut
    request: dict
    cancel_requested: bool
    currency: str
    ahead: int = 0


def _run_view(session: Session, run: MonteCarloRun) -> RunView:
    ahead = jobs.ahead_of(session, run.job) if run.job.status == "queued" else 0
    return RunView(robustness.run_out(run), dict(run.request), bool(run.job.cancel_requested),
                   get_lot(session, run.lot_id).tender.currency, ahead)


@dataclass
class RobustnessPage:
    """Each section's result, or the error that stops it (a box name and a message).

    ``problem`` says why nothing can be tested (no compliant offer); ``present_worth_problem``
    why the tornado and the Monte Carlo cannot move the basis's inputs. ``base_inputs`` are the
    present-worth inputs in the API's units (percent for rates), or None.
    """

    facts: LotFacts
    problem: str | None = None
    break_even: schemas.BreakEvenOut | None = None
    rate_map: schemas.RateMapOut | None = None
    rate_map_errors: dict[str, str] = field(default_factory=dict)
    tornado: schemas.TornadoOut | None = None
    tornado_errors: dict[str, str] = field(default_factory=dict)
    base_inputs: dict[str, float] | None = None
    present_worth_problem: str | None = None
    run: RunView | None = None


def _facts(lot) -> LotFacts:
    tender = lot.tender
    revision = lot.pricing_revision
    return LotFacts(lot.id, lot.name, tender.id, tender.reference, tender.title, tender.currency,
                    revision.cost_basis.id, revision.cost_basis.name, revision.revision, revision.method)


def api_base_inputs(lot) -> dict[str, float]:
    """``robustness.base_inputs`` in the API's names and units (percent for rates of interest),
    without the carbon cost, which no form moves. Raises InvalidField as it does."""
    base = robustness.base_inputs(lot)
    out: dict[str, float] = {}
    for api_name, domain_name in robustness.PCT_INPUTS.items():
        out[api_name] = 100.0 * base.pop(domain_name)
    base.pop("carbon_cost_per_kwh", None)
    return out | base


def _field_errors(exc: InvalidField, boxes: dict[str, str]) -> dict[str, str]:
    """A service refusal as a message beside the box it names (``boxes`` maps a service field
    to a box), or under the form when it names none."""
    return {boxes.get(exc.field, exc.field): exc.detail}


def _two_figures(value: float, up: bool) -> float:
    """``value`` rounded down (or up) to two significant figures."""
    if value <= 0:
        return 0.0
    scale = 10.0 ** (math.floor(math.log10(value)) - 1)
    return round((math.ceil if up else math.floor)(value / scale) * scale, 10)


def _readable_ranges(request: schemas.RateMapIn, be: schemas.BreakEvenOut) -> schemas.RateMapIn:
    """With no range asked, the service's default (a quarter to twice each current rate) widened
    to ends on two significant figures, which a person can read and type again."""
    if any(v is not None for v in (request.no_load_rate_min, request.no_load_rate_max, request.load_rate_min,
                                   request.load_rate_max)):
        return request
    a, b = be.no_load_rate_per_kw, be.load_rate_per_kw
    return request.model_copy(update={
        "no_load_rate_min": _two_figures(a * 0.25, up=False),
        "no_load_rate_max": _two_figures(max(a * 2.0, 1.0), up=True),
        "load_rate_min": _two_figures(b * 0.25, up=False),
        "load_rate_max": _two_figures(max(b * 2.0, 1.0), up=True),
    })


def latest_run(session: Session, lot_id: int) -> MonteCarloRun | None:
    return session.scalars(
        select(MonteCarloRun).where(MonteCarloRun.lot_id == lot_id).order_by(MonteCarloRun.id.desc()).limit(1)
    ).first()


def robustness_page(
    session: Session,
    lot_id: int,
    rate_map: schemas.RateMapIn | None,
    tornado: schemas.TornadoIn | None,
    run_id: int | None = None,
    tornado_boxes: dict[str, str] | None = None,
) -> RobustnessPage:
    """Break-even, rate map (when ``rate_map`` is given; with no range in it, over readable
    default ranges) and tornado (when ``tornado`` is given) for a lot, and a Monte Carlo run:
    ``run_id`` if given (shown only if it is this lot's), else the lot's latest. A section that
    cannot be computed carries its reason instead of its result; ``tornado_boxes`` maps an input
    the service refuses to the box its message goes beside."""
    lot = get_lot(session, lot_id)
    page = RobustnessPage(_facts(lot))
    try:
        page.break_even = robustness.lot_break_even(session, lot_id)
    except InvalidField as exc:
        page.problem = exc.detail
    try:
        page.base_inputs = api_base_inputs(lot)
    except InvalidField as exc:
        page.present_worth_problem = exc.detail
    if page.problem is None and rate_map is not None:
        rate_map = _readable_ranges(rate_map, page.break_even)
        try:
            page.rate_map = robustness.lot_rate_map(session, lot_id, rate_map)
        except InvalidField as exc:
            page.rate_map_errors = _field_errors(exc, {})
    if page.problem is None and page.present_worth_problem is None and tornado is not None:
        try:
            page.tornado = robustness.lot_tornado(session, lot_id, tornado)
        except InvalidField as exc:
            page.tornado_errors = _field_errors(exc, tornado_boxes or {})
    run = robustness.get_run(session, run_id) if run_id is not None else latest_run(session, lot_id)
    if run is not None and run.lot_id == lot_id:
        page.run = _run_view(session, run)
    return page


def run_view(session: Session, run_id: int) -> RunView:
    """A Monte Carlo run as its progress partial shows it."""
    return _run_view(session, robustness.get_run(session, run_id))


def cancel_run(session: Session, run_id: int, username: str, is_admin: bool) -> RunView:
    """``robustness.cancel_run`` for ``username`` (its owner or an admin only; a finished run keeps
    its final state), as ``run_view`` shows it."""
    return _run_view(session, robustness.cancel_run(session, run_id, username, is_admin))
