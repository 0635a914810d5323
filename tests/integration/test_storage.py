"""Services and storage: optimistic locking under a real race, and all-or-nothing writes."""

from __future__ import annotations

import pytest

from server import schemas
from server.errors import Conflict, InvalidField
from server.services import cost_bases, offers, tenders
from server.storage.database import Database
from tests import factories as f


@pytest.fixture
def db(db_url):
    database = Database(db_url)
    yield database
    database.dispose()


def _seed(db: Database) -> int:
    with db.session() as s:
        basis = cost_bases.create_cost_basis(s, schemas.DirectCostBasisCreate(**f.direct_basis()))
        tender = tenders.create_tender(s, schemas.TenderCreate(**f.tender(basis.id)))
        offer = offers.add_offer(s, tender.lots[0].id, schemas.OfferCreate(**f.offer()))
        return offer.id


def test_concurrent_edits_second_writer_conflicts(db):
    offer_id = _seed(db)
    # Two users read version 1, then both save: the database-level version check refuses the
    # second UPDATE even though each session passed its own version check.
    with db.session() as first, db.session() as second:
        a = offers.get_offer(first, offer_id)
        b = offers.get_offer(second, offer_id)
        assert a.version == b.version == 1
        a.unit_price = 111.0
        first.commit()
        b.unit_price = 222.0
        from server.services.common import commit

        with pytest.raises(Conflict):
            commit(second, "offer")
    with db.session() as s:
        stored = offers.get_offer(s, offer_id)
        assert stored.unit_price == 111.0 and stored.version == 2


def test_patch_with_stale_version_changes_nothing(db):
    offer_id = _seed(db)
    with db.session() as s:
        offers.patch_offer(s, offer_id, schemas.OfferPatch(version=1, unit_price=5.0))
    with db.session() as s, pytest.raises(Conflict) as info:
        offers.patch_offer(s, offer_id, schemas.OfferPatch(version=1, unit_price=6.0))
    assert info.value.current["unit_price"] == 5.0
    with db.session() as s:
        assert offers.get_offer(s, offer_id).unit_price == 5.0


def test_tender_with_duplicate_reference_writes_nothing(db):
    _seed(db)
    with db.session() as s, pytest.raises(InvalidField):
        basis_id = cost_bases.list_cost_bases(s)[0].id
        tenders.create_tender(s, schemas.TenderCreate(**f.tender(basis_id, lots=[f.lot(), f.lot(name="x")])))
    with db.session() as s:
        assert len(tenders.list_tenders(s)) == 1
