"""Read-only queries the fleet page needs beyond the shared services: the summary, the groups and
the loading findings from ONE read of the fleet's numbers (the API's three routes read every
column three times), so that a fleet of 100,000 units is costed in well under a second.

The text columns are read only where the page needs them: the grouping column when grouping by
region or site, and the names of the few units the loading lists show."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.fleet import FleetArrays, group_totals, loading_findings
from server import schemas
from server.errors import InvalidField
from server.services.fleet import FleetData, _annual, _group_keys, energy_terms
from server.storage.models import FleetUnit

_NUMBERS = ("SELECT id, rating_kva, phases, CASE WHEN insulation = 'dry' THEN 1 ELSE 0 END, year_installed, "
            "no_load_loss_w, load_loss_w, peak_load_pu, loss_factor, "
            "CASE WHEN no_load_loss_estimated THEN 1 ELSE 0 END, CASE WHEN load_loss_estimated THEN 1 ELSE 0 END "
            "FROM fleet_units ORDER BY id")
_LABELS = {"region": "SELECT region FROM fleet_units ORDER BY id", "site": "SELECT site FROM fleet_units ORDER BY id"}


def _fetch(session: Session, sql: str) -> list[tuple]:
    """Rows through the driver's cursor: the ORM's row objects would cost more than the arithmetic."""
    cursor = session.connection().connection.driver_connection.cursor()
    try:
        cursor.execute(sql)
        return cursor.fetchall()
    finally:
        cursor.close()


def _fleet_numbers(session: Session, by: str | None) -> tuple[np.ndarray, FleetData]:
    """Every unit's id and numbers as arrays, and the labels of ``by`` when it is region or site
    (``FleetData``'s other text columns are left empty: nothing here reads them)."""
    rows = _fetch(session, _NUMBERS)
    table = np.array(rows, dtype=float).T if rows else np.empty((11, 0))
    whole = lambda k: table[k].astype(np.int64)  # noqa: E731 - one line per column below
    arrays = FleetArrays(
        rating_kva=table[1].copy(), phases=whole(2), insulation=whole(3), year_installed=whole(4),
        no_load_loss_w=table[5].copy(), load_loss_w=table[6].copy(), peak_load_pu=table[7].copy(),
        loss_factor=table[8].copy(), estimated_no_load=table[9] > 0, estimated_load=table[10] > 0,
    )
    labels = [row[0] for row in _fetch(session, _LABELS[by])] if by in _LABELS else []
    return whole(0), FleetData(arrays, [], labels if by == "region" else [], labels if by == "site" else [])


def _names(session: Session, ids: list[int]) -> dict[int, tuple[str, str, str]]:
    """Asset id, region and site of a few units, by id."""
    if not ids:
        return {}
    found = session.execute(select(FleetUnit.id, FleetUnit.asset_id, FleetUnit.region, FleetUnit.site)
                            .where(FleetUnit.id.in_(ids)))
    return {row[0]: tuple(row[1:]) for row in found}


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


def _loading(session: Session, ids: np.ndarray, data: FleetData, max_loading_pu: float, min_loading_pu: float,
             limit: int) -> schemas.FleetLoadingOut:
    """As ``services.fleet.fleet_loading``, on arrays already read; the names of the units listed
    are read for those units alone."""
    a = data.arrays
    found = loading_findings(a.peak_load_pu, max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu)

    def chosen(mask: np.ndarray, descending: bool) -> np.ndarray:
        idx = np.flatnonzero(mask)
        order = np.argsort(a.peak_load_pu[idx])
        return idx[order[::-1] if descending else order][:limit]

    over, under = chosen(found.overloaded, True), chosen(found.oversized, False)
    names = _names(session, [int(ids[k]) for k in (*over, *under)])

    def listed(idx: np.ndarray) -> list[schemas.FleetUnitBrief]:
        return [schemas.FleetUnitBrief(asset_id=names[int(ids[k])][0], region=names[int(ids[k])][1],
                                       site=names[int(ids[k])][2], rating_kva=float(a.rating_kva[k]),
                                       peak_load_pu=float(a.peak_load_pu[k])) for k in idx]

    return schemas.FleetLoadingOut(
        max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu, overloaded_count=int(found.overloaded.sum()),
        oversized_count=int(found.oversized.sum()), overloaded=listed(over), oversized=listed(under),
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
    ids, data = _fleet_numbers(session, by if terms is not None else None)
    estimated = int((data.arrays.estimated_no_load | data.arrays.estimated_load).sum())
    summary = groups = None
    if terms is not None and cost_basis_id is not None:
        summary, groups = _costs(data, cost_basis_id, by, terms)
    return FleetOverview(len(ids), estimated, summary, groups,
                         _loading(session, ids, data, max_loading_pu, min_loading_pu, limit), problem)


def fleet_regions(session: Session) -> list[str]:
    """The regions the fleet's units name, in order (for the shortlist's region filter)."""
    return [r for r in session.scalars(select(FleetUnit.region).distinct().order_by(FleetUnit.region)) if r]
