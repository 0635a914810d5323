"""Read-only queries the fleet page needs beyond the shared services: the summary, the groups and
the loading findings from ONE read of the fleet's arrays (the API's three routes read it three
times), so that a fleet of 100,000 units is costed in well under a second."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.fleet import group_totals, loading_findings
from server import schemas
from server.errors import InvalidField
from server.services.fleet import FleetData, _annual, _group_keys, energy_terms, load_fleet
from server.storage.models import FleetUnit


@dataclass(frozen=True)
class FleetOverview:
    """What the fleet page shows. Without a usable cost basis the costs are None and
    ``basis_problem`` says why; the loading findings need no prices."""

    units: int
    units_with_estimated_losses: int
    summary: schemas.FleetSummaryOut | None
    groups: schemas.FleetGroupsOut | None
    loading: schemas.FleetLoadingOut
    basis_problem: str | None


def _loading(data: FleetData, max_loading_pu: float, min_loading_pu: float, limit: int) -> schemas.FleetLoadingOut:
    """As ``services.fleet.fleet_loading``, on arrays already read."""
    a = data.arrays
    found = loading_findings(a.peak_load_pu, max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu)

    def listed(mask: np.ndarray, descending: bool) -> list[schemas.FleetUnitBrief]:
        idx = np.flatnonzero(mask)
        order = np.argsort(a.peak_load_pu[idx], kind="stable")
        idx = idx[order[::-1] if descending else order][:limit]
        return [schemas.FleetUnitBrief(asset_id=data.asset_id[k], region=data.region[k], site=data.site[k],
                                       rating_kva=float(a.rating_kva[k]), peak_load_pu=float(a.peak_load_pu[k]))
                for k in idx]

    return schemas.FleetLoadingOut(
        max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu, overloaded_count=int(found.overloaded.sum()),
        oversized_count=int(found.oversized.sum()), overloaded=listed(found.overloaded, True),
        oversized=listed(found.oversized, False),
    )


def _costs(data: FleetData, cost_basis_id: int, by: str,
           terms) -> tuple[schemas.FleetSummaryOut, schemas.FleetGroupsOut]:
    """As ``services.fleet.fleet_summary`` and ``fleet_groups``, on arrays already read."""
    a = data.arrays
    values = _annual(data, terms)
    estimated = a.estimated_no_load | a.estimated_load
    summary = schemas.FleetSummaryOut(
        units=len(a.rating_kva), cost_basis_id=cost_basis_id,
        no_load_energy_kwh_per_year=float(values["no_load_energy_kwh"].sum()),
        load_energy_kwh_per_year=float(values["load_energy_kwh"].sum()),
        loss_cost_per_year=float(values["loss_cost"].sum()), co2_t_per_year=float(values["co2_t"].sum()),
        units_with_estimated_losses=int(estimated.sum()),
    )
    keys, labels = _group_keys(data, by)
    values["estimated"] = estimated.astype(float)
    totals = group_totals(values, keys, len(labels)) if len(keys) else {k: np.zeros(0) for k in (*values, "units")}
    rows = [
        schemas.FleetGroupOut(
            group=labels[g], units=int(totals["units"][g]),
            no_load_energy_kwh_per_year=float(totals["no_load_energy_kwh"][g]),
            load_energy_kwh_per_year=float(totals["load_energy_kwh"][g]),
            loss_cost_per_year=float(totals["loss_cost"][g]), co2_t_per_year=float(totals["co2_t"][g]),
            units_with_estimated_losses=int(totals["estimated"][g]),
        )
        for g in range(len(labels))
    ]
    rows.sort(key=lambda r: r.loss_cost_per_year, reverse=True)
    return summary, schemas.FleetGroupsOut(by=by, cost_basis_id=cost_basis_id, groups=rows)


def fleet_overview(session: Session, cost_basis_id: int | None, by: str, max_loading_pu: float,
                   min_loading_pu: float, limit: int) -> FleetOverview:
    """The whole fleet read once: its loss costs at a cost basis (when it has energy prices),
    grouped ``by`` region, site, rating, vintage or insulation, and its loading findings."""
    terms, problem = None, None
    if cost_basis_id is None:
        problem = "Choose a present-worth or fixed-charge-rate cost basis to cost the losses."
    else:
        try:
            terms = energy_terms(session, cost_basis_id)
        except InvalidField as exc:
            problem = exc.detail
    data = load_fleet(session)
    estimated = int((data.arrays.estimated_no_load | data.arrays.estimated_load).sum())
    summary = groups = None
    if terms is not None and cost_basis_id is not None:
        summary, groups = _costs(data, cost_basis_id, by, terms)
    return FleetOverview(len(data.asset_id), estimated, summary, groups,
                         _loading(data, max_loading_pu, min_loading_pu, limit), problem)


def fleet_regions(session: Session) -> list[str]:
    """The regions the fleet's units name, in order (for the shortlist's region filter)."""
    return [r for r in session.scalars(select(FleetUnit.region).distinct().order_by(FleetUnit.region)) if r]
