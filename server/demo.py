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
from server.services.load_shapes import create_load_shape
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

# Typical days for the two kinds of feeder the lots serve (invented curves, pu of the day's peak).
LOAD_SHAPES = [
    schemas.DailyShapeCreate(
        name="Harrowmere residential feeder",
        year=2026,
        seasons=[
            schemas.SeasonIn(
                name="Winter", months=[1, 2, 3, 10, 11, 12],
                weekday=[0.45, 0.4, 0.38, 0.37, 0.38, 0.45, 0.62, 0.75, 0.68, 0.6, 0.58, 0.6,
                         0.62, 0.6, 0.6, 0.66, 0.8, 0.95, 1.0, 0.96, 0.88, 0.76, 0.62, 0.52],
                weekend=[0.5, 0.45, 0.42, 0.4, 0.4, 0.43, 0.5, 0.62, 0.72, 0.76, 0.76, 0.75,
                         0.74, 0.72, 0.7, 0.74, 0.84, 0.95, 0.98, 0.94, 0.86, 0.76, 0.64, 0.55],
            ),
            schemas.SeasonIn(
                name="Summer", months=[4, 5, 6, 7, 8, 9],
                weekday=[0.3, 0.27, 0.26, 0.25, 0.26, 0.3, 0.4, 0.48, 0.45, 0.42, 0.42, 0.44,
                         0.46, 0.45, 0.45, 0.48, 0.55, 0.62, 0.66, 0.66, 0.62, 0.55, 0.44, 0.35],
                weekend=[0.33, 0.3, 0.28, 0.27, 0.27, 0.29, 0.34, 0.42, 0.5, 0.54, 0.55, 0.55,
                         0.54, 0.52, 0.5, 0.52, 0.57, 0.62, 0.64, 0.63, 0.6, 0.54, 0.45, 0.37],
            ),
        ],
    ),
    schemas.DailyShapeCreate(
        name="Harrowmere industrial estate",
        year=2026,
        seasons=[
            schemas.SeasonIn(
                name="All year", months=list(range(1, 13)),
                weekday=[0.35] * 6 + [0.7, 0.9] + [1.0] * 9 + [0.85, 0.6] + [0.4] * 5,
                weekend=[0.3] * 24,
            ),
        ],
    ),
]

LOTS = [
    # The pole-mounted lot carries the utility's own, stricter no-load cap; every lot must meet
    # the EU Tier 1 losses.
    schemas.LotCreate(
        name="100 kVA pole-mounted", rating_kva=100, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=120, max_no_load_loss_w=140, impedance_pct=4.0, limit_tables=["eu-tier-1"],
    ),
    schemas.LotCreate(
        name="400 kVA ground-mounted", rating_kva=400, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=40, impedance_pct=4.0, limit_tables=["eu-tier-1"],
    ),
    schemas.LotCreate(
        name="1000 kVA ground-mounted", rating_kva=1000, phases=3, hv_kv=20, lv_kv=0.4,
        insulation="liquid", quantity=8, impedance_pct=6.0, limit_tables=["eu-tier-1"],
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
# lowest total owning cost, each lot has a different leader under the present-worth basis, and
# two offers break a rule: the cheapest 100 kVA offer exceeds the utility's no-load cap, and the
# 400 kVA offer that would have the lowest TOC exceeds the EU Tier 1 no-load loss.
OFFERS = {
    0: [
        (3950, 145, 1750, 0, 4.0, 1.2, 10),
        (4420, 140, 1450, 0, 4.1, 0.9, 12),
        (4690, 125, 1250, 0, 4.0, 0.8, 14),
        (4150, 135, 1600, 0, 3.9, 1.0, 9),
        (4950, 75, 1300, 0, 4.2, 0.5, 18),
    ],
    1: [
        (11200, 430, 4600, 0, 4.0, 0.9, 12),
        (12400, 370, 3900, 0, 4.1, 0.7, 14),
        (13100, 330, 3250, 0, 4.0, 0.6, 16),
        (11900, 440, 3000, 0, 4.2, 1.0, 10),
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
    seed_scenario(session)
    return True


def seed_scenario(session: Session) -> Tender:
    """The scenario's cost bases, load shapes, tender, lots and offers (users aside); returns the tender."""
    bases = [create_cost_basis(session, body) for body in COST_BASES]
    residential, industrial = (create_load_shape(session, body) for body in LOAD_SHAPES)
    # The pole-mounted lot serves houses, the 1000 kVA lot an industrial estate: each gets its own
    # loading, so its load-loss rate differs from the basis's.
    lots = [
        LOTS[0].model_copy(update={"load_shape_id": residential.id, "peak_load_pu": 0.7, "load_growth_pct": 1.0}),
        LOTS[1],
        LOTS[2].model_copy(update={"load_shape_id": industrial.id, "peak_load_pu": 0.65}),
    ]
    tender = create_tender(
        session,
        schemas.TenderCreate(
            reference="HVE-2027-014",
            title=f"Distribution transformers 2027, {UTILITY}",
            currency="EUR",
            status="evaluation",
            cost_basis_id=bases[0].id,
            lots=lots,
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
    return tender


def demo_fleet_csv(units: int = 600) -> bytes:
    """An invented installed fleet: ratings, vintages and loadings spread as in a small network,
    one unit in eight without recorded losses (estimated from the typical-loss table)."""
    ratings = (50, 100, 160, 250, 400, 630, 1000)
    regions = ("Harrow North", "Harrow South", "Valley East", "Valley West")
    lines = ["asset_id,site,region,rating_kva,phases,insulation,year_installed,no_load_loss_w,load_loss_w,"
             "peak_load_pu,loss_factor"]
    for k in range(units):
        rating = ratings[(k * 7) % len(ratings)]
        year = 1968 + (k * 13) % 56
        age_factor = 1.0 + max(0, 2015 - year) / 60
        p0 = "" if k % 8 == 0 else round(rating * 1.25 * age_factor, 1)
        pk = "" if k % 8 == 0 else round(rating * 11.5 * (1 + (age_factor - 1) / 3), 1)
        peak = round(0.15 + ((k * 37) % 100) / 90, 3)
        lines.append(f"HVE-{k:05d},Substation {k % 45},{regions[k % 4]},{rating},3,"
                     f"{'dry' if k % 11 == 0 else 'liquid'},{year},{p0},{pk},{peak},{0.22 + (k % 5) * 0.03:.2f}")
    return ("\n".join(lines) + "\n").encode()


def seed_demo_fleet(session: Session) -> int:
    from server.services.fleet import stage_import

    staged = stage_import(session, "demo-fleet.csv", demo_fleet_csv(), commit_now=True)
    return staged.summary["rows"]
