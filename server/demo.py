"""The demo scenario: an invented utility, invented bidders, invented numbers.

Harrowmere Valley Electricity (fictional) buys three lots of distribution transformers.
None of the names or figures describe a real company or a real tender.
"""

from __future__ import annotations

import secrets

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server import schemas
from server.services.cost_bases import create_cost_basis
from server.services.offers import add_offer
from server.services.tenders import create_tender
from server.services.users import create_user
from server.storage.models import ROLES, CostBasis, Tender, User

UTILITY = "Harrowmere Valley Electricity (fictional)"

COST_BASES = [
    schemas.PresentWorthCostBasisCreate(
        name="Harrowmere 2027 present worth",
        currency="EUR",
        energy_price_per_kwh=0.055,
        energy_escalation_pct=1.5,
        capacity_cost_per_kw_year=70.0,
        discount_rate_pct=7.0,
        years=30,
        peak_load_pu=0.75,
        load_growth_pct=1.0,
        loss_factor=0.3,
        responsibility_factor=0.8,
        cooling_hours_per_year=600.0,
    ),
    schemas.DirectCostBasisCreate(
        name="Harrowmere 2027 published rates",
        currency="EUR",
        no_load_rate_per_kw=6500.0,
        load_rate_per_kw=1600.0,
        aux_rate_per_kw=900.0,
    ),
    schemas.FixedChargeRateCostBasisCreate(
        name="Harrowmere 2027 fixed charge rate",
        currency="EUR",
        system_capacity_cost_per_kw_year=90.0,
        energy_cost_per_kwh=0.06,
        fixed_charge_rate_pct=9.5,
        responsibility_factor=0.8,
        peak_load_pu=0.8,
        loss_factor=0.3,
        cooling_hours_per_year=600.0,
    ),
]

LOTS = [
    schemas.LotCreate(
        name="100 kVA pole-mounted", rating_kva=100, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=120, max_no_load_loss_w=145, max_load_loss_w=1750, impedance_pct=4.0,
    ),
    schemas.LotCreate(
        name="400 kVA ground-mounted", rating_kva=400, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=40, max_no_load_loss_w=430, max_load_loss_w=4600, impedance_pct=4.0,
    ),
    schemas.LotCreate(
        name="1000 kVA ground-mounted", rating_kva=1000, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=8, max_no_load_loss_w=770, max_load_loss_w=10500, impedance_pct=6.0,
    ),
]

BIDDERS = [
    "Ashgrove Coilworks (demo)",
    "Brightwater Magnetics (demo)",
    "Corrin Electrical (demo)",
    "Dunmore Windings (demo)",
    "Everly Transformer Works (demo)",
]

# Per lot, per bidder: unit price (EUR), no-load loss (W), load loss (W), aux loss (W),
# impedance (%), no-load current (%), delivery (weeks). The cheapest price never has the
# lowest total owning cost, and each lot has a different leader under the present-worth basis.
OFFERS = {
    0: [
        (3950, 190, 1700, 0, 4.0, 1.2, 10),
        (4420, 150, 1450, 0, 4.1, 0.9, 12),
        (4690, 125, 1250, 0, 4.0, 0.8, 14),
        (4150, 175, 1600, 0, 3.9, 1.0, 9),
        (4950, 75, 1300, 0, 4.2, 0.5, 18),
    ],
    1: [
        (11200, 430, 4600, 0, 4.0, 0.9, 12),
        (12400, 370, 3900, 0, 4.1, 0.7, 14),
        (13100, 330, 3250, 0, 4.0, 0.6, 16),
        (11900, 520, 3600, 0, 4.2, 1.0, 10),
        (14800, 220, 3400, 0, 4.1, 0.4, 20),
    ],
    2: [
        (24800, 770, 10500, 0, 6.0, 0.8, 14),
        (27300, 690, 8300, 0, 6.1, 0.6, 16),
        (29500, 600, 7600, 0, 5.9, 0.5, 18),
        (26100, 720, 9800, 250, 6.0, 0.7, 12),
        (32900, 450, 7800, 0, 6.2, 0.3, 22),
    ],
}


def seed_demo_users(session: Session) -> list[tuple[str, list[str], str]]:
    """One demo user per role, with fresh random passwords returned for the console only."""
    created = []
    for role in ROLES:
        name = f"demo-{role}"
        password = secrets.token_urlsafe(12)
        create_user(session, name, password, [role])
        created.append((name, [role], password))
    return created


def is_empty(session: Session) -> bool:
    return all(session.scalar(select(func.count()).select_from(model)) == 0 for model in (Tender, CostBasis, User))


def seed_demo(session: Session) -> bool:
    """Seed the scenario into an empty database; return False (and change nothing) otherwise."""
    if not is_empty(session):
        return False
    bases = [create_cost_basis(session, body) for body in COST_BASES]
    tender = create_tender(
        session,
        schemas.TenderCreate(
            reference="HVE-2027-014",
            title=f"Distribution transformers 2027, {UTILITY}",
            currency="EUR",
            status="evaluation",
            cost_basis_id=bases[0].id,
            lots=LOTS,
        ),
    )
    for index, lot in enumerate(tender.lots):
        for bidder, row in zip(BIDDERS, OFFERS[index], strict=True):
            price, p0, pk, paux, z, i0, weeks = row
            add_offer(
                session,
                lot.id,
                schemas.OfferCreate(
                    bidder=bidder, unit_price=price, no_load_loss_w=p0, load_loss_w=pk, aux_loss_w=paux,
                    impedance_pct=z, no_load_current_pct=i0, delivery_weeks=weeks,
                ),
            )
    return True
