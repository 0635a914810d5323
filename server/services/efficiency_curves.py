"""Use case: efficiency against loading for every offer of a lot, with the regulatory points."""

from __future__ import annotations

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.efficiency import efficiency, loading_of_maximum_efficiency
from domain.limits import interpolate_limit, tables_for
from server import schemas
from server.services.compliance import all_tables, unit_facts
from server.services.tenders import get_lot
from server.storage.models import Offer

LOADINGS_PU = np.round(np.arange(0.0, 1.5001, 0.05), 4)


def lot_efficiency_curves(session: Session, lot_id: int) -> schemas.EfficiencyCurvesOut:
    """Efficiency from 0 to 150 % loading at unity power factor (no-load and load loss only)."""
    lot = get_lot(session, lot_id)
    offers = session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id)).all()
    curves = []
    if offers:
        p0 = np.array([o.no_load_loss_w for o in offers])
        pk = np.array([o.load_loss_w for o in offers])
        eta = 100.0 * np.asarray(efficiency(LOADINGS_PU[:, None], lot.rating_kva, p0, pk))
        for j, offer in enumerate(offers):
            k_star = float(loading_of_maximum_efficiency(offer.no_load_loss_w, offer.load_loss_w)) if pk[j] > 0 else None
            eta_star = float(100.0 * efficiency(k_star, lot.rating_kva, p0[j], pk[j])) if k_star is not None else None
            curves.append(schemas.EfficiencyCurveOut(
                offer_id=offer.id, bidder=offer.bidder, efficiency_pct=[round(float(v), 5) for v in eta[:, j]],
                max_efficiency_loading_pu=k_star, max_efficiency_pct=eta_star,
            ))
    points = []
    tables = all_tables(session)
    for key in lot.limit_tables or []:
        for table in tables_for(key, unit_facts(lot), tables):
            if table.kind == "min_efficiency":
                points.append({"table": table.name, "kind": "min_efficiency", "loading_pu": table.per_unit_load,
                               "efficiency_pct": interpolate_limit(table.ratings_kva, table.values, lot.rating_kva)})
            elif table.kind == "min_pei":
                points.append({"table": table.name, "kind": "min_pei",
                               "efficiency_pct": interpolate_limit(table.ratings_kva, table.values, lot.rating_kva,
                                                                   table.extend_above)})
    return schemas.EfficiencyCurvesOut(lot_id=lot.id, loading_pu=LOADINGS_PU.tolist(), curves=curves,
                                       reference_points=points)
