"""JSON API: how sure a lot's ranking is."""

from __future__ import annotations

from fastapi import APIRouter, Request

from server import schemas
from server.auth import ANY_ROLE
from server.deps import SessionDep
from server.services import robustness as service

router = APIRouter(tags=["robustness"])


@router.get("/lots/{lot_id}/break-even", response_model=schemas.BreakEvenOut, dependencies=[ANY_ROLE])
def break_even(lot_id: int, session: SessionDep):
    """For the leader against every other compliant offer: the rates at which they tie."""
    return service.lot_break_even(session, lot_id)


@router.post("/lots/{lot_id}/rate-map", response_model=schemas.RateMapOut, dependencies=[ANY_ROLE])
def rate_map(lot_id: int, request: schemas.RateMapIn, session: SessionDep):
    """The winner over a grid of no-load and load rates, with the tie lines and the current basis."""
    return service.lot_rate_map(session, lot_id, request)


@router.post("/lots/{lot_id}/tornado", response_model=schemas.TornadoOut, dependencies=[ANY_ROLE])
def tornado(lot_id: int, request: schemas.TornadoIn, session: SessionDep):
    """Each cost basis input moved to its low and high value, one at a time."""
    return service.lot_tornado(session, lot_id, request)


@router.post("/lots/{lot_id}/monte-carlo", response_model=schemas.MonteCarloOut, dependencies=[ANY_ROLE])
def monte_carlo(lot_id: int, request: schemas.MonteCarloIn, session: SessionDep):
    """Win probability, TOC percentiles and expected regret per offer; the same seed gives the same result."""
    return service.lot_monte_carlo(session, lot_id, request)


@router.post("/lots/{lot_id}/monte-carlo-runs", status_code=202, response_model=schemas.MonteCarloRunOut,
             dependencies=[ANY_ROLE])
def start_run(lot_id: int, request: schemas.MonteCarloIn, session: SessionDep, http: Request):
    """Start a long Monte Carlo in the background; poll it for progress, cancel it if need be."""
    return service.run_out(service.start_run(session, http.app.state.db, lot_id, request))


@router.get("/monte-carlo-runs/{run_id}", response_model=schemas.MonteCarloRunOut, dependencies=[ANY_ROLE])
def get_run(run_id: int, session: SessionDep):
    return service.run_out(service.get_run(session, run_id))


@router.post("/monte-carlo-runs/{run_id}/cancel", response_model=schemas.MonteCarloRunOut, dependencies=[ANY_ROLE])
def cancel_run(run_id: int, session: SessionDep):
    return service.run_out(service.cancel_run(session, run_id))
