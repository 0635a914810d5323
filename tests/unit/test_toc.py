"""Total owning cost and ranking of offers (docs/references.md R2)."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from domain import (
    CapitalisationRates,
    InvalidInput,
    OfferLosses,
    RankedOffer,
    TocBreakdown,
    efficiency,
    rank_offers,
    rates_direct,
    total_owning_cost,
)


def test_published_worked_example_two_bids_for_a_50_mva_unit():
    # Source: "Take into account the losses when purchasing power transformer",
    # electrical-engineering-portal.com,
    # https://electrical-engineering-portal.com/take-into-account-the-losses-when-purchasing-power-transformer
    # 161/34.5 kV, 30/40/50 MVA transformer; evaluation factors 2450 / 1304 / 756 $/kW
    # (no-load / load / auxiliary). Bid A: $424,500, 59 kW, 224 kW, 2.0 kW;
    # bid B: $436,000, 53 kW, 218 kW, 2.5 kW. The article's totals: A $862,658,
    # B $852,012, so B wins despite the higher bid price.
    rates = rates_direct(2450.0, 1304.0, 756.0)
    offers = [
        OfferLosses(
            offer_id=1,
            bidder="Manufacturer A",
            unit_price=424_500.0,
            no_load_loss_w=59_000.0,
            load_loss_w=224_000.0,
            aux_loss_w=2_000.0,
        ),
        OfferLosses(
            offer_id=2,
            bidder="Manufacturer B",
            unit_price=436_000.0,
            no_load_loss_w=53_000.0,
            load_loss_w=218_000.0,
            aux_loss_w=2_500.0,
        ),
    ]
    ranked = rank_offers(offers, rates, quantity=1, rating_kva=50_000.0)
    assert [r.bidder for r in ranked] == ["Manufacturer B", "Manufacturer A"]
    assert [r.rank for r in ranked] == [1, 2]
    winner, runner_up = ranked
    # Article's component costs: B 129,850 / 284,272 / 1,890; A 144,550 / 292,096 / 1,512.
    assert_allclose(
        [winner.capitalised_no_load, winner.capitalised_load, winner.capitalised_aux, winner.toc_per_unit],
        [129_850.0, 284_272.0, 1_890.0, 852_012.0],
        rtol=1e-12,
    )
    assert_allclose(
        [
            runner_up.capitalised_no_load,
            runner_up.capitalised_load,
            runner_up.capitalised_aux,
            runner_up.toc_per_unit,
        ],
        [144_550.0, 292_096.0, 1_512.0, 862_658.0],
        rtol=1e-12,
    )


def test_total_owning_cost_scalar_returns_floats():
    breakdown = total_owning_cost(
        1000.0, 2000.0, 10_000.0, 500.0, CapitalisationRates(5000.0, 2000.0, 1000.0)
    )
    assert isinstance(breakdown, TocBreakdown)
    assert all(isinstance(value, float) for value in breakdown)
    # 1000 + 5000 * 2 + 2000 * 10 + 1000 * 0.5 (hand computed).
    assert_allclose(breakdown, [10_000.0, 20_000.0, 500.0, 31_500.0])


def test_total_owning_cost_arrays_broadcast_and_nan_propagates():
    rates = CapitalisationRates(5000.0, 2000.0, 0.0)
    breakdown = total_owning_cost(
        np.array([1000.0, 2000.0, np.nan]), 1000.0, np.array([0.0, 1000.0, 0.0]), 0.0, rates
    )
    assert breakdown.toc_per_unit.shape == (3,)
    assert breakdown.capitalised_no_load.shape == (3,)
    assert_allclose(breakdown.toc_per_unit[:2], [6000.0, 9000.0])
    assert np.isnan(breakdown.toc_per_unit[2])


def test_total_owning_cost_rejects_negative_losses():
    with pytest.raises(InvalidInput) as caught:
        total_owning_cost(1000.0, -1.0, 0.0, 0.0, rates_direct(1.0, 1.0))
    assert caught.value.field == "no_load_loss_w"


money = st.floats(0.0, 1e7, allow_nan=False)
loss_w = st.floats(0.0, 1e6, allow_nan=False)
positive_rate = st.floats(0.01, 1e4, allow_nan=False)
delta_w = st.floats(1.0, 1e6, allow_nan=False)


@given(
    price=money,
    p0=loss_w,
    pk=loss_w,
    paux=loss_w,
    a=positive_rate,
    b=positive_rate,
    c=positive_rate,
    delta=delta_w,
)
def test_toc_strictly_rises_with_each_loss(price, p0, pk, paux, a, b, c, delta):
    rates = CapitalisationRates(a, b, c)
    base = total_owning_cost(price, p0, pk, paux, rates).toc_per_unit
    assert total_owning_cost(price, p0 + delta, pk, paux, rates).toc_per_unit > base
    assert total_owning_cost(price, p0, pk + delta, paux, rates).toc_per_unit > base
    assert total_owning_cost(price, p0, pk, paux + delta, rates).toc_per_unit > base


bidder_names = st.sampled_from(["Alpha", "alpha", "ALPHA", "Beta", "beta", "Gamma", ""])


@st.composite
def tender_offers(draw):
    """Offers drawn from small value sets, so that ties in TOC and price are common."""
    count = draw(st.integers(0, 12))
    ids = draw(st.lists(st.integers(1, 10_000), min_size=count, max_size=count, unique=True))
    return [
        OfferLosses(
            offer_id=offer_id,
            bidder=draw(bidder_names),
            unit_price=draw(st.sampled_from([10_000.0, 12_000.0, 15_000.0])),
            no_load_loss_w=draw(st.sampled_from([400.0, 600.0, 800.0])),
            load_loss_w=draw(st.sampled_from([4000.0, 5000.0, 6000.0])),
            aux_loss_w=draw(st.sampled_from([0.0, 100.0])),
        )
        for offer_id in ids
    ]


RATES = CapitalisationRates(no_load_rate_per_kw=5000.0, load_rate_per_kw=2000.0, aux_rate_per_kw=1000.0)


@given(data=st.data())
def test_ranking_does_not_depend_on_input_order(data):
    offers = data.draw(tender_offers())
    shuffled = data.draw(st.permutations(offers))
    assert rank_offers(shuffled, RATES, 3, 630.0) == rank_offers(offers, RATES, 3, 630.0)


@given(offers=tender_offers())
def test_ranking_follows_the_stated_sort_keys(offers):
    # Independent reference: Python's sorted() on (TOC, price, casefolded bidder, id).
    ranked = rank_offers(offers, RATES, 1, 630.0)

    def key(offer):
        toc = total_owning_cost(
            offer.unit_price, offer.no_load_loss_w, offer.load_loss_w, offer.aux_loss_w, RATES
        )
        return (toc.toc_per_unit, offer.unit_price, offer.bidder.casefold(), offer.offer_id)

    assert [r.offer_id for r in ranked] == [o.offer_id for o in sorted(offers, key=key)]
    assert [r.rank for r in ranked] == list(range(1, len(offers) + 1))


def test_many_ties_are_broken_by_bidder_then_id_deterministically():
    same = dict(unit_price=10_000.0, no_load_loss_w=500.0, load_loss_w=5000.0, aux_loss_w=0.0)
    offers = [
        OfferLosses(offer_id=7, bidder="beta", **same),
        OfferLosses(offer_id=3, bidder="Alpha", **same),
        OfferLosses(offer_id=9, bidder="alpha", **same),
        OfferLosses(offer_id=1, bidder="Beta", **same),
        OfferLosses(offer_id=5, bidder="gamma", **same),
        OfferLosses(offer_id=2, bidder="alpha", **same),
    ]
    expected = [(2, "alpha"), (3, "Alpha"), (9, "alpha"), (1, "Beta"), (7, "beta"), (5, "gamma")]
    rng = np.random.default_rng(7)
    for _ in range(20):
        order = rng.permutation(len(offers))
        ranked = rank_offers([offers[i] for i in order], RATES, 1, 500.0)
        assert [(r.offer_id, r.bidder) for r in ranked] == expected


def test_equal_toc_goes_to_the_lower_price():
    # A = 1000 per kW, i.e. 1 per W. Hand computed: cheap 10,000 + 5,000 = 15,000;
    # dear 14,000 + 1,000 = 15,000. Equal TOC, so the lower price ranks first.
    rates = CapitalisationRates(1000.0, 0.0, 0.0)
    cheap = OfferLosses(
        offer_id=2, bidder="Zeta", unit_price=10_000.0, no_load_loss_w=5000.0, load_loss_w=0.0
    )
    dear = OfferLosses(
        offer_id=1, bidder="Alpha", unit_price=14_000.0, no_load_loss_w=1000.0, load_loss_w=0.0
    )
    ranked = rank_offers([dear, cheap], rates, 1, 100.0)
    assert ranked[0].toc_per_unit == ranked[1].toc_per_unit == 15_000.0
    assert [r.offer_id for r in ranked] == [2, 1]


def test_ranked_offer_fields_quantity_and_efficiencies():
    offer = OfferLosses(
        offer_id=4,
        bidder="Delta",
        unit_price=20_000.0,
        no_load_loss_w=1000.0,
        load_loss_w=10_000.0,
        aux_loss_w=0.0,
    )
    (ranked,) = rank_offers([offer], RATES, quantity=12, rating_kva=1000.0)
    assert isinstance(ranked, RankedOffer)
    assert ranked.toc_per_unit == 20_000.0 + 5000.0 + 20_000.0  # hand computed
    assert ranked.toc_total == 12 * ranked.toc_per_unit
    assert sorted(ranked.efficiency_pct) == [25, 50, 75, 100]
    assert ranked.efficiency_50_pct == ranked.efficiency_pct[50]
    assert_allclose(ranked.efficiency_50_pct, 100 * 500_000 / 503_500, rtol=1e-12)  # hand computed
    assert_allclose(ranked.efficiency_pct[100], 100 * efficiency(1.0, 1000.0, 1000.0, 10_000.0), rtol=1e-15)
    assert all(type(v) is float for v in ranked.efficiency_pct.values())
    assert type(ranked.offer_id) is int and type(ranked.toc_total) is float


def test_empty_offers_give_empty_ranking():
    assert rank_offers([], RATES, 1, 100.0) == []


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        (dict(unit_price=-1.0), "unit_price"),
        (dict(no_load_loss_w=math.nan), "no_load_loss_w"),
        (dict(load_loss_w=math.inf), "load_loss_w"),
        (dict(aux_loss_w=-0.5), "aux_loss_w"),
    ],
)
def test_rank_offers_rejects_bad_offer_values(changes, field):
    values = dict(
        offer_id=8, bidder="Eta", unit_price=1.0, no_load_loss_w=1.0, load_loss_w=1.0, aux_loss_w=0.0
    )
    with pytest.raises(InvalidInput) as caught:
        rank_offers([OfferLosses(**(values | changes))], RATES, 1, 100.0)
    assert caught.value.field == field
    assert "offer 8" in caught.value.message


@pytest.mark.parametrize(
    ("quantity", "rating", "field"),
    [(0, 100.0, "quantity"), (1.5, 100.0, "quantity"), (1, 0.0, "rating_kva")],
)
def test_rank_offers_rejects_bad_lot(quantity, rating, field):
    with pytest.raises(InvalidInput) as caught:
        rank_offers([], RATES, quantity, rating)
    assert caught.value.field == field
