"""Use cases for how sure a ranking is: break-even rates, the rate map, a tornado of the
cost basis inputs, and Monte Carlo runs (in the request, or in the background)."""

from __future__ import annotations

import threading
from datetime import UTC, timedelta
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from domain.errors import DomainError, InvalidInput
from domain.rates import CapitalisationRates
from domain.sensitivity import (
    OfferArrays,
    SimulationCancelled,
    break_even,
    break_even_sentences,
    lower_envelope_lines,
    monte_carlo,
    present_worth_rates_fn,
    split_leader,
    tornado,
    winner_grid,
)
from server import schemas
from server.errors import InvalidField
from server.services.common import commit, get_or_404
from server.services.cost_bases import present_worth_arguments
from server.services.loading import lot_inputs, lot_rates
from server.services.ranking import rankable_offers
from server.services.tenders import get_lot
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
    def wrapped(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except InvalidInput as exc:
            raise InvalidField(_api_name(exc.field), exc.message) from exc
    wrapped.__name__, wrapped.__doc__ = fn.__name__, fn.__doc__
    return wrapped


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


def _default_ranges(base: dict[str, float]) -> dict[str, tuple[float, float]]:
    ranges = {}
    for name, value in base.items():
        if name == "carbon_cost_per_kwh":
            continue
        if name in PCT_INPUTS.values():
            ranges[name] = (max(value - 0.02, -0.5), value + 0.02)
        elif name == "years":
            ranges[name] = (max(int(round(value * 0.8)), 1), int(round(value * 1.2)))
        elif name in ("loss_factor", "responsibility_factor"):
            ranges[name] = (value * 0.8, min(value * 1.2, 1.0))
        elif value > 0:
            ranges[name] = (value * 0.8, value * 1.2)
    return ranges


@_domain_errors
def lot_tornado(session: Session, lot_id: int, request: schemas.TornadoIn) -> schemas.TornadoOut:
    ctx = _context(session, lot_id, minimum=2)
    base = base_inputs(ctx.lot)
    ranges = _default_ranges(base)
    for name, (low, high) in request.ranges.items():
        domain_name = _domain_name(name)
        ranges[domain_name] = (low / _scale(name), high / _scale(name))
        if domain_name == "years":
            ranges[domain_name] = (int(low), int(high))
    rows = tornado(base, ranges, present_worth_rates_fn, ctx.offers)
    leader, rivals = split_leader(ctx.offers, ctx.rates)
    runner_up = None
    if len(rivals.offer_ids):
        runner_up = int(rivals.offer_ids[int(np.argmin(rivals.toc(ctx.rates.no_load_rate_per_kw, ctx.rates.load_rate_per_kw,
                                                                   ctx.rates.aux_rate_per_kw)))])
    return schemas.TornadoOut(
        lot_id=ctx.lot.id, leader_offer_id=int(leader.offer_ids[0]), runner_up_offer_id=runner_up,
        rows=[schemas.TornadoRowOut(
            input=_api_name(r.input_name), base_value=r.base_value * _scale(_api_name(r.input_name)),
            low_value=r.low_value * _scale(_api_name(r.input_name)),
            high_value=r.high_value * _scale(_api_name(r.input_name)), margin_base=r.margin_base,
            margin_low=r.margin_low, margin_high=r.margin_high, swing=r.swing, leader_low_offer_id=r.leader_id_low,
            leader_high_offer_id=r.leader_id_high, leader_changes=r.leader_changed_low or r.leader_changed_high,
        ) for r in rows],
    )


def _distributions(inputs: dict[str, schemas.DistributionIn]) -> dict[str, dict[str, Any]]:
    out = {}
    for name, dist in inputs.items():
        scale = _scale(name)
        spec = {k: (v / scale if isinstance(v, float | int) and k != "dist" else v)
                for k, v in dist.model_dump(exclude_none=True).items()}
        out[_domain_name(name)] = spec
    return out


def _mc_out(ctx: LotContext, result, request: schemas.MonteCarloIn) -> schemas.MonteCarloOut:
    return schemas.MonteCarloOut(
        lot_id=ctx.lot.id, draws=result.draws, seed=result.seed, leader_offer_id=result.base_leader_id,
        rows=[schemas.MonteCarloRowOut(offer_id=o.offer_id, bidder=ctx.bidders[o.offer_id],
                                       win_probability=o.win_probability, toc_p5=o.toc_p5, toc_p50=o.toc_p50,
                                       toc_p95=o.toc_p95, toc_mean=o.toc_mean, expected_regret=o.expected_regret)
              for o in sorted(result.offers, key=lambda o: -o.win_probability)],
    )


@_domain_errors
def lot_monte_carlo(session: Session, lot_id: int, request: schemas.MonteCarloIn, progress=None,
                    should_stop=None) -> schemas.MonteCarloOut:
    ctx = _context(session, lot_id)
    base = base_inputs(ctx.lot)
    result = monte_carlo(ctx.offers, base, _distributions(request.inputs), request.draws, request.seed,
                         progress=progress, should_stop=should_stop)
    return _mc_out(ctx, result, request)


# --- background runs ---------------------------------------------------------------------------

def start_run(session: Session, database, lot_id: int, request: schemas.MonteCarloIn) -> MonteCarloRun:
    """Check the request, store the run and start it in a background thread."""
    ctx = _context(session, lot_id)
    base_inputs(ctx.lot)  # refuse now, not in the background, when the basis cannot be moved
    run = MonteCarloRun(lot_id=ctx.lot.id, created_by=audit.get_actor(session).username,
                        request=request.model_dump(mode="json"))
    session.add(run)
    commit(session, "Monte Carlo run")
    threading.Thread(target=_run_in_background, args=(database, run.id), daemon=True,
                     name=f"monte-carlo-{run.id}").start()
    return run


def _run_in_background(database, run_id: int) -> None:
    with database.session() as session:
        run = session.get(MonteCarloRun, run_id)
        request = schemas.MonteCarloIn(**run.request)
        last = {"written": 0.0}

        def progress(fraction: float) -> None:
            if fraction - last["written"] >= 0.05:
                last["written"] = fraction
                with database.session() as s:
                    s.get(MonteCarloRun, run_id).progress = fraction
                    s.commit()

        def should_stop() -> bool:
            with database.session() as s:
                return bool(s.get(MonteCarloRun, run_id).cancel_requested)

        try:
            out = lot_monte_carlo(session, run.lot_id, request, progress, should_stop)
            run.status, run.progress, run.result = "done", 1.0, out.model_dump(mode="json")
        except SimulationCancelled:
            run.status, run.message = "cancelled", "Cancelled on request."
        except (DomainError, InvalidField) as exc:
            run.status, run.message = "failed", str(exc)
        except Exception as exc:  # a background thread has no caller to raise to
            run.status, run.message = "failed", f"Unexpected error: {type(exc).__name__}"
        session.commit()


# A run still "running" after this long lost its worker (a restart, a crash): it is marked failed.
STALE_RUN = timedelta(minutes=30)


def get_run(session: Session, run_id: int) -> MonteCarloRun:
    run = get_or_404(session, MonteCarloRun, run_id, "Monte Carlo run")
    started = run.created_at if run.created_at.tzinfo else run.created_at.replace(tzinfo=UTC)
    if run.status == "running" and utcnow() - started > STALE_RUN:
        run.status, run.message = "failed", "The process running this stopped before it finished; start it again."
        commit(session, "Monte Carlo run")
    return run


def cancel_run(session: Session, run_id: int) -> MonteCarloRun:
    run = get_run(session, run_id)
    if run.status == "running":
        run.cancel_requested = True
        commit(session, "Monte Carlo run")
    return run


def run_out(run: MonteCarloRun) -> schemas.MonteCarloRunOut:
    return schemas.MonteCarloRunOut(
        id=run.id, lot_id=run.lot_id, status=run.status, progress=run.progress, message=run.message,
        created_by=run.created_by, created_at=run.created_at,
        result=schemas.MonteCarloOut(**run.result) if run.result else None,
    )


# --- robustness frozen with an award -------------------------------------------------------------

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
    request = schemas.MonteCarloIn(draws=AWARD_DRAWS, seed=1, inputs={
        "energy_price_per_kwh": schemas.DistributionIn(dist="triangular", low=e * 0.75, mode=e, high=e * 1.25),
        "discount_rate_pct": schemas.DistributionIn(dist="uniform", low=100 * i - 2, high=100 * i + 2),
        "load_growth_pct": schemas.DistributionIn(dist="uniform", low=100 * g - 1, high=100 * g + 1),
    })
    result = lot_monte_carlo(session, lot_id, request)
    leader = next(r for r in result.rows if r.offer_id == result.leader_offer_id)
    out["monte_carlo"] = {"draws": AWARD_DRAWS, "seed": 1, "inputs": AWARD_INPUTS,
                          "leader_offer_id": leader.offer_id, "leader_win_probability": leader.win_probability,
                          "rows": [r.model_dump() for r in result.rows]}
    return out
