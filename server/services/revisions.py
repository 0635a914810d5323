"""Use cases for cost basis revisions: compare two, preview one on open lots, show its workings."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.rates import carbon_cost_per_kwh, fixed_charge_rate_terms, present_worth_table
from server import schemas
from server.exports import write_csv
from server.services.cost_bases import (
    fixed_charge_rate_arguments,
    get_cost_basis,
    get_revision,
    parse_inputs,
    present_worth_arguments,
)
from server.services.locks import active_record
from server.services.ranking import rank_lot
from server.storage.models import CostBasisRevision, Tender

RATE_FIELDS = ("no_load_rate_per_kw", "load_rate_per_kw", "aux_rate_per_kw")


def diff_revisions(session: Session, cost_basis_id: int, revision: int, against: int) -> schemas.RevisionDiffOut:
    """Every input and rate that differs between two revisions (``against`` is the older one)."""
    new = get_revision(session, cost_basis_id, revision)
    old = get_revision(session, cost_basis_id, against)
    changes = []
    if new.method != old.method:
        changes.append(schemas.FieldChangeOut(field="method", before=old.method, after=new.method))
    for field in sorted(set(old.inputs) | set(new.inputs)):
        if old.inputs.get(field) != new.inputs.get(field):
            changes.append(schemas.FieldChangeOut(field=field, before=old.inputs.get(field), after=new.inputs.get(field)))
    for field in RATE_FIELDS:
        if getattr(old, field) != getattr(new, field):
            changes.append(schemas.FieldChangeOut(field=field, before=getattr(old, field), after=getattr(new, field)))
    return schemas.RevisionDiffOut(cost_basis_id=cost_basis_id, revision=revision, against=against, changes=changes,
                                   change_reason=new.change_reason)


def preview_revision(session: Session, cost_basis_id: int, revision: int) -> schemas.RevisionPreviewOut:
    """Re-rank every open lot of the tenders on this basis under ``revision``, nothing stored."""
    target = get_revision(session, cost_basis_id, revision)
    tenders = session.scalars(
        select(Tender)
        .join(CostBasisRevision, Tender.cost_basis_revision_id == CostBasisRevision.id)
        .where(CostBasisRevision.cost_basis_id == cost_basis_id, Tender.status != "awarded")
        .order_by(Tender.id)
    ).all()
    lots_out = []
    for tender in tenders:
        for lot in tender.lots:
            if active_record(session, lot.id) is not None:
                continue
            now = rank_lot(session, lot, tender.cost_basis_revision)
            then = rank_lot(session, lot, target)
            then_by_id = {row.offer_id: row for row in then.rows}
            rows = [
                schemas.PreviewRowOut(
                    offer_id=row.offer_id, bidder=row.bidder, rank_now=row.rank,
                    rank_then=then_by_id[row.offer_id].rank, toc_now=row.toc_per_unit,
                    toc_then=then_by_id[row.offer_id].toc_per_unit,
                    toc_change=then_by_id[row.offer_id].toc_per_unit - row.toc_per_unit,
                )
                for row in now.rows
            ]
            order_now = [row.offer_id for row in now.rows]
            order_then = [row.offer_id for row in then.rows]
            lots_out.append(schemas.PreviewLotOut(
                lot_id=lot.id, lot_name=lot.name, tender_id=tender.id, tender_reference=tender.reference,
                current_revision=tender.cost_basis_revision.revision, order_changes=order_now != order_then,
                leader_changes=bool(order_now) and order_now[0] != order_then[0], rows=rows,
            ))
    return schemas.RevisionPreviewOut(
        cost_basis_id=cost_basis_id, revision=revision, lots=lots_out,
        changed_lot_ids=[lot.lot_id for lot in lots_out if lot.order_changes],
    )


CONVENTIONS = [
    "Year t runs 1..n; each year's cost is paid at its end and discounted by (1 + i)^t.",
    "The energy price in year t is price x (1 + e)^(t-1), or the explicit price of year t; "
    "a carbon cost (price per tonne x emission factor) is added to it.",
    "The peak loading in year t is peak x (1 + g)^(t-1); load loss in year t scales with its square.",
    "A, B and C are present values per kW of guaranteed loss.",
]

# How each fixed-charge-rate term reads on the workings page (SC, EC, RF, PL, LsF as the method names them).
_FCR_FORMULAS = {
    ("A", "capacity"): "SC / FCR",
    ("A", "energy"): "EC x 8760 / FCR",
    ("A", "carbon"): "carbon x 8760 / FCR",
    ("B", "capacity"): "SC x RF x PL^2 / FCR",
    ("B", "energy"): "EC x 8760 x LsF x PL^2 / FCR",
    ("B", "carbon"): "carbon x 8760 x LsF x PL^2 / FCR",
    ("C", "capacity"): "SC x RF / FCR",
    ("C", "energy"): "EC x cooling hours / FCR",
    ("C", "carbon"): "carbon x cooling hours / FCR",
}
_COMPONENT_FORMULAS = {
    ("A", "capacity"): "sum SC / (1+i)^t",
    ("A", "energy"): "sum price_t x hours / (1+i)^t",
    ("A", "carbon"): "sum carbon x hours / (1+i)^t",
    ("B", "capacity"): "sum SC x RF x peak_t^2 / (1+i)^t",
    ("B", "energy"): "sum price_t x hours x LsF x peak_t^2 / (1+i)^t",
    ("B", "carbon"): "sum carbon x hours x LsF x peak_t^2 / (1+i)^t",
    ("C", "capacity"): "sum SC x RF / (1+i)^t",
    ("C", "energy"): "sum price_t x cooling hours / (1+i)^t",
    ("C", "carbon"): "sum carbon x cooling hours / (1+i)^t",
}
TABLE_COLUMNS = [
    "year", "discount_factor", "energy_price_per_kwh", "carbon_cost_per_kwh", "peak_load_pu",
    "no_load_capacity", "no_load_energy", "no_load_carbon", "no_load_term",
    "load_capacity", "load_energy", "load_carbon", "load_term",
    "aux_capacity", "aux_energy", "aux_carbon", "aux_term",
]


def workings(session: Session, cost_basis_id: int, revision: int) -> schemas.WorkingsOut:
    """Every term of A, B and C with its inputs, and the year-by-year table where there is one."""
    basis = get_cost_basis(session, cost_basis_id)
    rev = get_revision(session, cost_basis_id, revision)
    inputs = parse_inputs({**rev.inputs, "method": rev.method})
    terms: list[schemas.RateTermOut] = []
    table: list[list[float]] = []
    columns: list[str] = []
    if rev.method == "present_worth":
        year_table = present_worth_table(**present_worth_arguments(inputs))
        for rate, loss in (("A", "no_load"), ("B", "load"), ("C", "aux")):
            for component in ("capacity", "energy", "carbon"):
                terms.append(schemas.RateTermOut(
                    rate=rate, component=component, value_per_kw=float(year_table[f"{loss}_{component}"].sum()),
                    formula=_COMPONENT_FORMULAS[(rate, component)],
                ))
        columns = TABLE_COLUMNS
        table = [[float(year_table[c][k]) for c in columns] for k in range(inputs.years)]
    elif rev.method == "fixed_charge_rate":
        values = fixed_charge_rate_terms(**fixed_charge_rate_arguments(inputs), carbon_cost_per_kwh=carbon_cost_per_kwh(
            inputs.carbon_price_per_t, inputs.emission_factor_t_per_mwh))
        for (rate, component), value in values.items():
            terms.append(schemas.RateTermOut(rate=rate, component=component, value_per_kw=value,
                                             formula=_FCR_FORMULAS[(rate, component)]))
    else:
        for rate, field in (("A", "no_load_rate_per_kw"), ("B", "load_rate_per_kw"), ("C", "aux_rate_per_kw")):
            terms.append(schemas.RateTermOut(rate=rate, component="entered", value_per_kw=getattr(rev, field),
                                             formula="entered as published"))
    return schemas.WorkingsOut(
        cost_basis_id=basis.id, name=basis.name, revision=rev.revision, method=rev.method, currency=basis.currency,
        inputs=rev.inputs, conventions=CONVENTIONS if rev.method == "present_worth" else [], terms=terms,
        table_columns=columns, table=table, no_load_rate_per_kw=rev.no_load_rate_per_kw,
        load_rate_per_kw=rev.load_rate_per_kw, aux_rate_per_kw=rev.aux_rate_per_kw,
    )


def workings_csv(out: schemas.WorkingsOut) -> str:
    """The year-by-year table (or the terms, for methods without one) as CSV."""
    if out.table:
        return write_csv(out.table_columns, out.table)
    return write_csv(("rate", "component", "value_per_kw", "formula"),
                     [(t.rate, t.component, t.value_per_kw, t.formula) for t in out.terms])
