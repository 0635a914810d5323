"""Use cases for how sure a ranking is: break-even rates, the rate map, a tornado of the
cost basis inputs, and Monte Carlo runs (small ones in the request, the others on the job queue,
``server.jobs``)."""

from __future__ import annotations

import functools
import math
import re
import typing
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import annotated_types
import numpy as np
from sqlalchemy import select, update
from sqlalchemy.orm import Session

from domain.errors import DomainError, InvalidInput
from domain.rates import CapitalisationRates
from domain.sensitivity import (
    OPTIONAL_RATE_INPUT_NAMES,
    InputRange,
    OfferArrays,
    SimulationCancelled,
    break_even,
    break_even_sentences,
    check_distributions,
    lower_envelope_lines,
    lowest_toc_index,
    monte_carlo,
    present_worth_rates_fn,
    split_leader,
    tornado,
    winner_grid,
)
from server import jobs, schemas
from server.errors import InvalidField, ServiceError
from server.services.common import commit, get_or_404
from server.services.cost_bases import present_worth_arguments
from server.services.loading import lot_inputs, lot_rates
from server.services.ranking import rankable_offers
from server.services.tenders import get_lot
from server.settings import get_settings
from server.storage import audit
from server.storage.models import MonteCarloRun, utcnow

# API names in percent, domain names in fractions.
PCT_INPUTS = {"energy_escalation_pct": "energy_escalation", "discount_rate_pct": "discount_rate",
              "load_growth_pct": "load_growth"}


def _domain_name(name: str) -> str:
    return PCT_INPUTS.get(name, name)


def _api_name(name: str) -> str:
    return next((api for api, dom in PCT_INPUTS.items() if dom == name), name)


def _scale(name: str) -> float:
    return 100.0 if name in PCT_INPUTS else 1.0


# The inputs the tornado and the Monte Carlo may move (API names).
SENSITIVITY_INPUTS: tuple[str, ...] = typing.get_args(schemas.SensitivityInput)


def _schema_range(name: str) -> InputRange:
    """The bounds the cost basis schema puts on one present-worth input (API units)."""
    info = schemas.PresentWorthInputs.model_fields[name]
    low, high, low_open = -math.inf, math.inf, False
    for bound in info.metadata:
        if isinstance(bound, annotated_types.Ge):
            low = float(bound.ge)
        elif isinstance(bound, annotated_types.Gt):
            low, low_open = float(bound.gt), True
        elif isinstance(bound, annotated_types.Le):
            high = float(bound.le)
    return InputRange(low, high, low_open=low_open, whole=info.annotation is int)


@functools.cache
def input_limits() -> dict[str, InputRange]:
    """Allowed values of each input the tornado and the Monte Carlo move, in the API's names and
    units (percent for rates of interest): the bounds of ``schemas.PresentWorthInputs``, so that
    these tools never move an input where the cost basis form would refuse it. The cooling hours
    are also held to the hours of the year the present-worth rates count (8760): the domain
    refuses more cooling than there are hours."""
    limits = {name: _schema_range(name) for name in SENSITIVITY_INPUTS}
    cooling = limits["cooling_hours_per_year"]
    hours = OPTIONAL_RATE_INPUT_NAMES["hours_per_year"]
    limits["cooling_hours_per_year"] = InputRange(cooling.low, min(cooling.high, hours), cooling.low_open)
    return limits


def _domain_limits() -> dict[str, InputRange]:
    """``input_limits`` in the domain's names and units (fractions for rates of interest)."""
    out = {}
    for name, limit in input_limits().items():
        scale = _scale(name)
        out[_domain_name(name)] = InputRange(limit.low / scale, limit.high / scale, limit.low_open, limit.whole)
    return out


def _api_field(field: str) -> str:
    """A domain error's field in the API's names: ``distributions[discount_rate].sd`` becomes
    ``inputs.discount_rate_pct.sd`` (the member of the request it is about)."""
    found = re.fullmatch(r"distributions\[(\w+)\](?:\.(\w+))?", field)
    if found is None:
        return _api_name(field)
    name, key = found.groups()
    return f"inputs.{_api_name(name)}" + (f".{key}" if key else "")


@dataclass
class LotContext:
    lot: Any
    currency: str
    offers: OfferArrays
    bidders: dict[int, str]
    rates: CapitalisationRates


def _context(session: Session, lot_id: int, minimum: int = 1) -> LotContext:
    lot = get_lot(session, lot_id)
    offers = rankable_offers(session, lot)
    if len(offers) < minimum:
        raise InvalidField("lot", f"needs at least {minimum} compliant offers for this analysis.")
    rates, _ = lot_rates(lot)
    return LotContext(lot, lot.tender.currency, OfferArrays.from_offers(offers), {o.offer_id: o.bidder for o in offers},
                      rates)


def base_inputs(lot) -> dict[str, float]:
    """The lot's present-worth inputs as domain values (fractions), for tornado and Monte Carlo."""
    inputs, _, _ = lot_inputs(lot)
    if getattr(inputs, "method", None) != "present_worth":
        raise InvalidField("cost_basis", "this analysis moves the inputs of a present-worth cost basis; the tender's "
                           "basis has none (its rates are entered or levelised).")
    if inputs.energy_price_path_per_kwh:
        raise InvalidField("cost_basis", "this analysis moves a flat energy price with escalation; the basis gives an "
                           "explicit price for each year.")
    arguments = present_worth_arguments(inputs)
    del arguments["energy_price_path_per_kwh"]
    return arguments


def _domain_errors(fn):
    """Domain refusals as InvalidField named as the API names the input. The robustness
    services check every input in the API's units first (``input_limits``,
    ``distribution_problems``), so a domain message that gets here names no number in a
    fraction the user never typed."""
    def wrapped(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except InvalidInput as exc:
            raise InvalidField(_api_field(exc.field), exc.message) from exc
    wrapped.__name__, wrapped.__doc__ = fn.__name__, fn.__doc__
    return wrapped


def _number(value: float, name: str) -> str:
    """A limit or a value as the page shows it: percent for rates of interest, no float noise."""
    text = f"{int(value):,}" if float(value).is_integer() and abs(value) < 1e15 else f"{value:.6g}"
    return f"{text} %" if name in PCT_INPUTS else text


def limit_problem(name: str, value: float) -> str | None:
    """Why ``value`` is not an allowed value of input ``name`` (API units), in words, or None."""
    limit = input_limits()[name]
    if limit.whole and (not float(value).is_integer() or value < limit.low):
        return f"must be a whole number of years, {_number(limit.low, name)} or more"
    if value <= limit.low if limit.low_open else value < limit.low:
        relation = "more than {}" if limit.low_open else "{} or more"
        return f"must be {relation.format(_number(limit.low, name))}"
    if value > limit.high:
        return f"must be {_number(limit.high, name)} or less"
    return None


def distribution_problems(inputs: dict[str, schemas.DistributionIn]) -> dict[str, str]:
    """Every problem of a Monte Carlo request's distributions, as {field: message}, the field
    ``inputs.<input>.<box>`` and the message in the API's units (percent for rates), naming no
    input: the bounds of each distribution within the input's allowed values, so that no draw
    falls outside them; low below high; the most likely value between them; a positive spread."""
    problems: dict[str, str] = {}
    for name, dist in inputs.items():
        used = {"fixed": ("mode",), "uniform": ("low", "high"), "triangular": ("low", "mode", "high"),
                "normal": ("low", "high")}[dist.dist]
        for key in used:
            value = getattr(dist, key)
            found = limit_problem(name, value) if value is not None else None
            if found:
                problems[f"inputs.{name}.{key}"] = found
        if dist.dist != "fixed" and dist.low is not None and dist.high is not None and not dist.low < dist.high:
            problems.setdefault(f"inputs.{name}.high", "must be more than the low value")
        if dist.dist == "triangular" and None not in (dist.low, dist.mode, dist.high):
            if not dist.low <= dist.mode <= dist.high:
                problems.setdefault(f"inputs.{name}.mode", "must lie between the low and the high value")
        if dist.dist == "normal" and dist.sd is not None and not dist.sd > 0:
            problems.setdefault(f"inputs.{name}.sd", "must be more than 0")
    return problems


def _check_monte_carlo(base: dict[str, float], request: schemas.MonteCarloIn) -> dict[str, dict[str, Any]]:
    """The request's distributions in domain units, after refusing (InvalidField) what the
    Monte Carlo would refuse, the first problem first."""
    problems = distribution_problems(request.inputs)
    if problems:
        field, message = next(iter(problems.items()))
        raise InvalidField(field, message)
    distributions = _distributions(request.inputs)
    try:
        check_distributions(base, distributions)
    except InvalidInput as exc:
        raise InvalidField(_api_field(exc.field), exc.message) from exc
    return distributions


@_domain_errors
def lot_break_even(session: Session, lot_id: int) -> schemas.BreakEvenOut:
    ctx = _context(session, lot_id)
    leader, rivals = split_leader(ctx.offers, ctx.rates)
    results = break_even(leader, rivals, ctx.rates) if len(rivals.offer_ids) else []
    sentences = break_even_sentences(results, ctx.currency) if results else []
    leader_id = int(leader.offer_ids[0])
    rows = [
        schemas.BreakEvenRowOut(
            offer_id=r.rival_id, bidder=ctx.bidders[r.rival_id], margin_now=r.margin_now, price_gap=r.price_gap,
            no_load_loss_gap_w=r.no_load_loss_gap_w, load_loss_gap_w=r.load_loss_gap_w, aux_loss_gap_w=r.aux_loss_gap_w,
            load_rate_per_kw=r.load_rate_tie_per_kw, load_rate_side=r.load_rate_side,
            no_load_rate_per_kw=r.no_load_rate_tie_per_kw, no_load_rate_side=r.no_load_rate_side,
            sentences=list(sentences[k]),
        )
        for k, r in enumerate(results)
    ]
    return schemas.BreakEvenOut(
        lot_id=ctx.lot.id, currency=ctx.currency, leader_offer_id=leader_id, leader_bidder=ctx.bidders[leader_id],
        no_load_rate_per_kw=ctx.rates.no_load_rate_per_kw, load_rate_per_kw=ctx.rates.load_rate_per_kw,
        aux_rate_per_kw=ctx.rates.aux_rate_per_kw, rows=rows,
    )


@_domain_errors
def lot_rate_map(session: Session, lot_id: int, request: schemas.RateMapIn) -> schemas.RateMapOut:
    ctx = _context(session, lot_id)
    a, b = ctx.rates.no_load_rate_per_kw, ctx.rates.load_rate_per_kw
    a_lo = request.no_load_rate_min if request.no_load_rate_min is not None else a * 0.25
    a_hi = request.no_load_rate_max if request.no_load_rate_max is not None else max(a * 2.0, 1.0)
    b_lo = request.load_rate_min if request.load_rate_min is not None else b * 0.25
    b_hi = request.load_rate_max if request.load_rate_max is not None else max(b * 2.0, 1.0)
    if a_hi <= a_lo or b_hi <= b_lo:
        raise InvalidField("no_load_rate_max", "each range needs its maximum above its minimum.")
    a_values = np.linspace(a_lo, a_hi, request.steps)
    b_values = np.linspace(b_lo, b_hi, request.steps)
    grid = winner_grid(ctx.offers, a_values, b_values, ctx.rates.aux_rate_per_kw)
    ids = ctx.offers.offer_ids
    segments = lower_envelope_lines(ctx.offers, a_values, b_values, ctx.rates.aux_rate_per_kw, grid)
    leader, _ = split_leader(ctx.offers, ctx.rates)
    return schemas.RateMapOut(
        lot_id=ctx.lot.id, no_load_rates=a_values.tolist(), load_rates=b_values.tolist(),
        winners=ids[grid].tolist(), offers={int(i): ctx.bidders[int(i)] for i in ids},
        tie_lines=[{"offers": [s.first_offer_id, s.second_offer_id],
                    "start": [s.no_load_rate_start_per_kw, s.load_rate_start_per_kw],
                    "end": [s.no_load_rate_end_per_kw, s.load_rate_end_per_kw]} for s in segments],
        current={"no_load_rate_per_kw": a, "load_rate_per_kw": b}, leader_offer_id=int(leader.offer_ids[0]),
    )


def default_ranges(base: dict[str, float]) -> dict[str, tuple[float, float]]:
    """How the tornado moves an input it is given no range for, in the API's names and units:
    rates of interest 2 points either way, years 20 % either way in whole years, other inputs
    20 % either way (an input at zero is not moved). Not clipped here: the tornado clips each
    value to ``input_limits`` and says which it clipped."""
    ranges: dict[str, tuple[float, float]] = {}
    for name in SENSITIVITY_INPUTS:
        value = base.get(name)
        if value is None:
            continue
        if name in PCT_INPUTS:
            ranges[name] = (value - 2.0, value + 2.0)
        elif name == "years":
            ranges[name] = (max(int(round(value * 0.8)), 1), int(round(value * 1.2)))
        elif value > 0:
            ranges[name] = (value * 0.8, value * 1.2)
    return ranges


def api_inputs(base: dict[str, float]) -> dict[str, float]:
    """Domain inputs (fractions for rates of interest) in the API's names and units (percent)."""
    return {_api_name(name): value * _scale(_api_name(name)) for name, value in base.items()}


@_domain_errors
def lot_tornado(session: Session, lot_id: int, request: schemas.TornadoIn) -> schemas.TornadoOut:
    """The tornado of a lot's present-worth inputs: each input at its low and its high value (as
    asked, else ``default_ranges``), clipped to ``input_limits``; leader and runner-up at the
    lot's rates, ties broken as the ranking breaks them."""
    ctx = _context(session, lot_id, minimum=2)
    base = base_inputs(ctx.lot)
    asked = default_ranges(api_inputs(base)) | {name: (low, high) for name, (low, high) in request.ranges.items()}
    if "years" in request.ranges:
        for side, value in zip(("low", "high"), request.ranges["years"], strict=True):
            if not float(value).is_integer():
                raise InvalidField(f"ranges.years.{side}", "must be a whole number of years")
    ranges: dict[str, tuple[float, float]] = {}
    for name, (low, high) in asked.items():
        ranges[_domain_name(name)] = (int(low), int(high)) if name == "years" else (low / _scale(name), high / _scale(name))
    rows = tornado(base, ranges, present_worth_rates_fn, ctx.offers, limits=_domain_limits())
    leader, rivals = split_leader(ctx.offers, ctx.rates)
    runner_up = None
    if len(rivals.offer_ids):
        rates = ctx.rates
        runner_up = int(rivals.offer_ids[lowest_toc_index(
            rivals.toc(rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw))])
    out_rows = []
    for r in rows:
        name = _api_name(r.input_name)
        out_rows.append(schemas.TornadoRowOut(
            input=name, base_value=r.base_value * _scale(name), low_value=r.low_value * _scale(name),
            high_value=r.high_value * _scale(name), low_clipped=r.low_clipped, high_clipped=r.high_clipped,
            margin_base=r.margin_base, margin_low=r.margin_low, margin_high=r.margin_high, swing=r.swing,
            leader_low_offer_id=r.leader_id_low, leader_high_offer_id=r.leader_id_high,
            leader_changes=r.leader_changed_low or r.leader_changed_high,
        ))
    return schemas.TornadoOut(lot_id=ctx.lot.id, leader_offer_id=int(leader.offer_ids[0]),
                              runner_up_offer_id=runner_up, rows=out_rows)


def _distributions(inputs: dict[str, schemas.DistributionIn]) -> dict[str, dict[str, Any]]:
    out = {}
    for name, dist in inputs.items():
        scale = _scale(name)
        spec = {k: (v / scale if isinstance(v, float | int) and k != "dist" else v)
                for k, v in dist.model_dump(exclude_none=True).items()}
        out[_domain_name(name)] = spec
    return out


def _mc_out(ctx: LotContext, result, request: schemas.MonteCarloIn) -> schemas.MonteCarloOut:
    """Rows by win probability, most first; equal shares (offers that never win, or offers alike in
    price and losses) in the order of the ranking at the run's base rates."""
    base_toc = ctx.offers.toc(result.base_no_load_rate_per_kw, result.base_load_rate_per_kw,
                              result.base_aux_rate_per_kw)
    # A stable sort on TOC of offers already in the tie order is the ranking's order.
    place = {int(ctx.offers.offer_ids[k]): n for n, k in enumerate(np.argsort(base_toc, kind="stable"))}
    return schemas.MonteCarloOut(
        lot_id=ctx.lot.id, draws=result.draws, seed=result.seed, leader_offer_id=result.base_leader_id,
        rows=[schemas.MonteCarloRowOut(offer_id=o.offer_id, bidder=ctx.bidders[o.offer_id],
                                       win_probability=o.win_probability, toc_p5=o.toc_p5, toc_p50=o.toc_p50,
                                       toc_p95=o.toc_p95, toc_mean=o.toc_mean, expected_regret=o.expected_regret)
              for o in sorted(result.offers, key=lambda o: (-o.win_probability, place[o.offer_id]))],
    )


@_domain_errors
def lot_monte_carlo(session: Session, lot_id: int, request: schemas.MonteCarloIn, progress=None,
                    should_stop=None) -> schemas.MonteCarloOut:
    """A Monte Carlo of the lot's present-worth inputs (rows as ``_mc_out`` orders them); a draw's
    exact ties go to the offer the ranking puts first. On ``monte_carlo_threads`` threads."""
    ctx = _context(session, lot_id)
    base = base_inputs(ctx.lot)
    distributions = _check_monte_carlo(base, request)
    result = monte_carlo(ctx.offers, base, distributions, request.draws, request.seed,
                         workers=get_settings().monte_carlo_threads, progress=progress, should_stop=should_stop)
    return _mc_out(ctx, result, request)


def lot_monte_carlo_now(session: Session, lot_id: int, request: schemas.MonteCarloIn) -> schemas.MonteCarloOut:
    """``lot_monte_carlo`` while the request waits: at most ``max_sync_draws`` draws (InvalidField
    on ``draws`` beyond, saying to queue it as a run)."""
    limit = get_settings().max_sync_draws
    if request.draws > limit:
        raise InvalidField("draws", f"at most {limit:,} draws are computed while the request waits; queue a "
                           f"larger run with POST /api/v1/lots/{lot_id}/monte-carlo-runs and poll it for its result.")
    return lot_monte_carlo(session, lot_id, request)


# --- runs on the job queue ---------------------------------------------------------------------

JOB_KIND = "monte_carlo"


def start_run(session: Session, lot_id: int, request: schemas.MonteCarloIn) -> MonteCarloRun:
    """Check the request, store the run and queue its job, in one transaction."""
    ctx = _context(session, lot_id)
    # Refuse now, not in the worker, a basis that cannot be moved or a distribution the Monte
    # Carlo would refuse.
    _check_monte_carlo(base_inputs(ctx.lot), request)
    owner = audit.get_actor(session).username
    job_id = jobs.enqueue(session, JOB_KIND, {"lot_id": ctx.lot.id}, owner)
    run = MonteCarloRun(lot_id=ctx.lot.id, job_id=job_id, created_by=owner, created_at=utcnow(),
                        request=request.model_dump(mode="json"))
    session.add(run)
    commit(session, "Monte Carlo run")
    return run


def run_monte_carlo_job(work: jobs.Work) -> Callable[[Session], None]:
    """The job of a run: its Monte Carlo, with the job's progress and stop check; the result is
    written in the transaction that marks the job done."""
    with work.database.session() as session:
        run = session.scalars(select(MonteCarloRun).where(MonteCarloRun.job_id == work.job_id)).one_or_none()
        if run is None:
            raise jobs.Failed("The run was deleted before it started.")
        run_id, lot_id, request = run.id, run.lot_id, schemas.MonteCarloIn(**run.request)
        try:
            out = lot_monte_carlo(session, lot_id, request, work.report, work.should_stop)
        except SimulationCancelled as exc:
            raise jobs.Cancelled from exc
        except InvalidField as exc:
            # Inputs were checked when the run started: what fails here changed since (the lot,
            # its offers, its basis), and the message says it without naming a field.
            raise jobs.Failed(exc.detail) from exc
        except (DomainError, ServiceError) as exc:
            raise jobs.Failed(getattr(exc, "message", None) or str(exc)) from exc
    result = out.model_dump(mode="json")

    def write(session: Session) -> None:
        session.execute(update(MonteCarloRun).where(MonteCarloRun.id == run_id).values(result=result))

    return write


def get_run(session: Session, run_id: int) -> MonteCarloRun:
    """A run, its job's state checked (one whose worker is gone is failed now)."""
    run = get_or_404(session, MonteCarloRun, run_id, "Monte Carlo run")
    jobs.check_worker(session, run.job)
    return run


def cancel_run(session: Session, run_id: int, username: str, is_admin: bool) -> MonteCarloRun:
    """Cancel a run for ``username``: only its owner or an admin may (``jobs.NotYours``, 403). A
    queued run is cancelled at once, a running one stops between two batches of draws, a finished
    one keeps its state."""
    run = get_run(session, run_id)
    jobs.request_cancel(session, run.job, username, is_admin)
    return run


def run_out(run: MonteCarloRun) -> schemas.MonteCarloRunOut:
    job = run.job
    return schemas.MonteCarloRunOut(
        id=run.id, lot_id=run.lot_id, status=job.status, progress=job.progress, message=job.message,
        cancel_requested=job.cancel_requested, created_by=run.created_by, created_at=run.created_at,
        started_at=job.started_at, finished_at=job.finished_at,
        result=schemas.MonteCarloOut(**run.result) if run.result else None,
    )


# --- robustness frozen with an award -------------------------------------------------------------

# Computed in the award's own request, not queued: the award seals the result in the same
# transaction, and 2,000 draws on ``monte_carlo_threads`` threads take a small fraction of a
# second even for a lot at ``max_offers_per_lot``.
AWARD_DRAWS = 2000
AWARD_INPUTS = {
    "energy_price_per_kwh": "triangular, -25 % to +25 % around the basis",
    "discount_rate_pct": "uniform, -2 to +2 points",
    "load_growth_pct": "uniform, -1 to +1 point",
}


def award_robustness(session: Session, lot_id: int) -> dict[str, Any]:
    """Break-even sentences and, for a present-worth basis, a Monte Carlo with stated inputs."""
    out: dict[str, Any] = {"computed_at": utcnow().isoformat()}
    try:
        be = lot_break_even(session, lot_id)
        out["break_even"] = [{"offer_id": r.offer_id, "bidder": r.bidder, "sentences": r.sentences} for r in be.rows]
        lot = get_lot(session, lot_id)
        base = base_inputs(lot)
    except InvalidField as exc:
        out["monte_carlo_note"] = exc.detail
        return out
    e, i, g = base["energy_price_per_kwh"], base["discount_rate"], base["load_growth"]
    limits = input_limits()

    def within(name: str, value: float) -> float:
        return limits[name].clip(value)

    inputs = {
        "energy_price_per_kwh": schemas.DistributionIn(dist="triangular", low=within("energy_price_per_kwh", e * 0.75),
                                                       mode=e, high=within("energy_price_per_kwh", e * 1.25)),
        "discount_rate_pct": schemas.DistributionIn(dist="uniform", low=within("discount_rate_pct", 100 * i - 2),
                                                    high=within("discount_rate_pct", 100 * i + 2)),
        "load_growth_pct": schemas.DistributionIn(dist="uniform", low=within("load_growth_pct", 100 * g - 1),
                                                  high=within("load_growth_pct", 100 * g + 1)),
    }
    # A range with nothing in it (a free energy price) leaves that input at the basis.
    request = schemas.MonteCarloIn(draws=AWARD_DRAWS, seed=1, inputs={
        name: dist for name, dist in inputs.items() if dist.low < dist.high})
    result = lot_monte_carlo(session, lot_id, request)
    leader = next(r for r in result.rows if r.offer_id == result.leader_offer_id)
    out["monte_carlo"] = {"draws": AWARD_DRAWS, "seed": 1, "inputs": AWARD_INPUTS,
                          "leader_offer_id": leader.offer_id, "leader_win_probability": leader.win_probability,
                          "rows": [r.model_dump() for r in result.rows]}
    return out
