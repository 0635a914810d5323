"""JSON API: how sure a lot's ranking is."""

from __future__ import annotations

from fastapi import APIRouter, Request

from server import schemas
from server.auth import ANY_ROLE
from server.deps import SessionDep
from server.services import robustness as service

router = APIRouter(tags=["robustness"])


@router.get("/lots/{lot_id}/break-even", response_model=schemas.BreakEvenOut, dependencies=[ANY_ROLE])
def break_even(lot_id: schemas.PathId, session: SessionDep):
    """For the leader against every other compliant offer: the rates at which they tie."""
    return service.lot_break_even(session, lot_id)


@router.post("/lots/{lot_id}/rate-map", response_model=schemas.RateMapOut, dependencies=[ANY_ROLE])
def rate_map(lot_id: schemas.PathId, request: schemas.RateMapIn, session: SessionDep):
    """The winner over a grid of no-load and load rates, with the tie lines and the current basis."""
    return service.lot_rate_map(session, lot_id, request)


@router.post("/lots/{lot_id}/tornado", response_model=schemas.TornadoOut, dependencies=[ANY_ROLE])
def tornado(lot_id: schemas.PathId, request: schemas.TornadoIn, session: SessionDep):
    """Each cost basis input moved to its low and high value, one at a time."""
    return service.lot_tornado(session, lot_id, request)


@router.post("/lots/{lot_id}/monte-carlo", response_model=schemas.MonteCarloOut, dependencies=[ANY_ROLE],
             responses={422: {"model": schemas.UnprocessableOut, "description": (
                 "Input that breaks a rule; among them more draws than are computed while the request waits "
                 "(``draws``, 20,000 unless the server says otherwise): queue those as a run.")}})
def monte_carlo(lot_id: schemas.PathId, request: schemas.MonteCarloIn, session: SessionDep):
    """Win probability, TOC percentiles and expected regret per offer, computed while the request waits (up to
    20,000 draws unless the server is set otherwise); the same seed gives the same result."""
    return service.lot_monte_carlo_now(session, lot_id, request)


@router.post("/lots/{lot_id}/monte-carlo-runs", status_code=202, response_model=schemas.MonteCarloRunOut,
             dependencies=[ANY_ROLE],
             responses={409: {"model": schemas.ErrorOut,
                              "description": "You already have as many runs waiting or running as one person may."}})
def start_run(lot_id: schemas.PathId, request: schemas.MonteCarloIn, session: SessionDep):
    """Queue a Monte Carlo of up to 1,000,000 draws as a run; poll it for its status, progress (in steps of
    5 %) and result. Only you, or an admin, may cancel it."""
    return service.run_out(service.start_run(session, lot_id, request))


@router.get("/monte-carlo-runs/{run_id}", response_model=schemas.MonteCarloRunOut, dependencies=[ANY_ROLE])
def get_run(run_id: schemas.PathId, session: SessionDep):
    """A run's status, progress and, once done, its result. Anyone may look."""
    return service.run_out(service.get_run(session, run_id))


@router.post("/monte-carlo-runs/{run_id}/cancel", response_model=schemas.MonteCarloRunOut, dependencies=[ANY_ROLE],
             responses={403: {"model": schemas.ErrorOut,
                              "description": "Not the run's owner (who started it) and not an admin: "
                                             "anyone may look at a run, only they may cancel it."}})
def cancel_run(run_id: schemas.PathId, session: SessionDep, http: Request):
    """Cancel a run: only the person who started it, or an admin (anyone else gets 403; the run exists and
    anyone may read it, so it is not hidden as a 404). A queued run is cancelled at once, a running one stops
    at its next batch of draws, a finished one keeps its state."""
    principal = http.state.principal
    return service.run_out(service.cancel_run(session, run_id, principal.username, "admin" in principal.roles))
