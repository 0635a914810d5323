"""Sensitivity of the ranking: break-even rates, rate map, tornado, Monte Carlo (docs/references.md R2, R3)."""

import math
import threading
import time

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from domain import (
    CapitalisationRates,
    InvalidInput,
    OfferLosses,
    rank_offers,
    rates_direct,
    sensitivity,
    total_owning_cost,
)
from domain.rates import rates_present_worth
from domain.sensitivity import (
    OfferArrays,
    SimulationCancelled,
    break_even,
    break_even_sentences,
    leader_index,
    lower_envelope_lines,
    monte_carlo,
    present_worth_rates_fn,
    present_worth_rates_vectorised,
    split_leader,
    tornado,
    winner_grid,
)
from server.services.awards import rank_frozen

# Present-worth inputs also used by test_rates.py (invented, typical of a distribution utility).
BASE = dict(
    energy_price_per_kwh=0.09,
    energy_escalation=0.025,
    capacity_cost_per_kw_year=85.0,
    discount_rate=0.075,
    years=30,
    peak_load_pu=0.7,
    load_growth=0.015,
    loss_factor=0.28,
    responsibility_factor=0.85,
    cooling_hours_per_year=1500.0,
)

# Published worked example (see test_toc.py for the source): 50 MVA unit, rates
# 2450 / 1304 / 756 $/kW; bid A $424,500, 59 / 224 / 2.0 kW; bid B $436,000, 53 / 218 / 2.5 kW.
ARTICLE_RATES = rates_direct(2450.0, 1304.0, 756.0)
BID_A = OfferLosses(1, "Manufacturer A", 424_500.0, 59_000.0, 224_000.0, 2_000.0)
BID_B = OfferLosses(2, "Manufacturer B", 436_000.0, 53_000.0, 218_000.0, 2_500.0)


def _offers(*rows):
    """OfferArrays from (id, price, P0 W, Pk W, Paux W) rows, in the order given."""
    ids, prices, p0, pk, paux = zip(*rows, strict=True)
    return OfferArrays(offer_ids=np.array(ids), prices=prices, p0_w=p0, pk_w=pk, paux_w=paux)


def _losses(offer_id, price, p0, pk, paux=0.0, bidder=None):
    return OfferLosses(offer_id, bidder or f"Bidder {offer_id}", price, p0, pk, paux)


# --------------------------------------------------------------------------- OfferArrays


def test_offer_arrays_toc_matches_total_owning_cost_bit_for_bit():
    # Published worked example: A $862,658, B $852,012 (article totals).
    offers = OfferArrays.from_offers([BID_A, BID_B])
    toc = offers.toc(2450.0, 1304.0, 756.0)
    expected = total_owning_cost(offers.prices, offers.p0_w, offers.pk_w, offers.paux_w, ARTICLE_RATES)
    assert np.array_equal(toc, expected.toc_per_unit)
    assert_allclose(sorted(toc.tolist()), [852_012.0, 862_658.0], rtol=1e-12)


def test_from_offers_puts_offers_in_the_tie_break_order_of_rank_offers():
    # Same price and losses: rank_offers orders by casefolded bidder, then offer_id.
    same = dict(unit_price=10_000.0, no_load_loss_w=500.0, load_loss_w=5000.0, aux_loss_w=0.0)
    raw = [
        OfferLosses(offer_id=7, bidder="beta", **same),
        OfferLosses(offer_id=3, bidder="Alpha", **same),
        OfferLosses(offer_id=9, bidder="alpha", **same),
        OfferLosses(offer_id=2, bidder="alpha", **same),
    ]
    offers = OfferArrays.from_offers(raw)
    ranked = rank_offers(raw, ARTICLE_RATES, 1, 500.0)
    assert offers.offer_ids.tolist() == [r.offer_id for r in ranked] == [2, 3, 9, 7]
    assert offers.offer_ids[leader_index(offers, ARTICLE_RATES)] == 2


def test_equal_toc_goes_to_the_lower_price_as_in_rank_offers():
    # Hand computed (test_toc.py): at A = 1000/kW cheap 10,000 + 5,000 = dear 14,000 + 1,000.
    cheap = OfferLosses(2, "Zeta", unit_price=10_000.0, no_load_loss_w=5000.0, load_loss_w=0.0)
    dear = OfferLosses(1, "Alpha", unit_price=14_000.0, no_load_loss_w=1000.0, load_loss_w=0.0)
    offers = OfferArrays.from_offers([dear, cheap])
    assert offers.toc(1000.0, 0.0, 0.0).tolist() == [15_000.0, 15_000.0]
    assert offers.offer_ids[winner_grid(offers, [1000.0], [0.0], 0.0)[0, 0]] == 2
    assert rank_offers([dear, cheap], rates_direct(1000.0, 0.0), 1, 100.0)[0].offer_id == 2


def test_offer_arrays_are_read_only_copies_and_reject_bad_losses():
    prices = np.array([1.0, 2.0])
    offers = OfferArrays(offer_ids=[1, 2], prices=prices, p0_w=[1, 1], pk_w=[1, 1], paux_w=[0, 0])
    prices[0] = 99.0
    assert offers.prices[0] == 1.0
    with pytest.raises(ValueError):
        offers.prices[0] = 5.0
    with pytest.raises(InvalidInput) as caught:
        OfferArrays(offer_ids=[1, 2], prices=[1, 2], p0_w=[1, -1], pk_w=[1, 1], paux_w=[0, 0])
    assert caught.value.field == "p0_w" and "offer 2" in caught.value.message
    with pytest.raises(InvalidInput) as caught:
        OfferArrays(offer_ids=[1, 2], prices=[1, 2], p0_w=[1, 1], pk_w=[1, math.nan], paux_w=[0, 0])
    assert caught.value.field == "pk_w"
    with pytest.raises(InvalidInput):
        OfferArrays(offer_ids=[1, 2], prices=[1, 2, 3], p0_w=[1, 1], pk_w=[1, 1], paux_w=[0, 0])


# --------------------------------------------------------------------------- exact ties, every tool


def _vectorised_direct(inputs):
    """Rates A, B, C taken straight from the inputs: a Monte Carlo at rates chosen by the test."""
    return inputs["a"], inputs["b"], inputs["c"]


def _price_for_toc(target, p0, pk, paux, rates):
    """A unit price whose TOC at ``rates`` is ``target`` bit for bit, in the ranking's own
    arithmetic (total_owning_cost): the exact difference, then nudged by units in the last place."""
    capitalised = total_owning_cost(0.0, p0, pk, paux, rates).toc_per_unit
    price = target - capitalised
    for _ in range(64):
        if price < 0:
            return None
        toc = total_owning_cost(price, p0, pk, paux, rates).toc_per_unit
        if toc == target:
            return price
        price = math.nextafter(price, math.inf if toc < target else -math.inf)
    return None


TIE_NAMES = ["Alpha", "alpha", "ALPHA", "Beta", "beta", "Gamma", "delta", "Delta"]


def _tied_case(rng, case):
    """One lot with two to five offers of exactly equal TOC (as total_owning_cost computes it)
    and up to two dearer ones; even cases share price and losses, odd ones offset different
    losses with the price at rates that are not round (so the TOC's last bits depend on the
    order of the operations). Invented values, whole watts, as tenders state them."""
    rates = rates_direct(*(float(x) for x in rng.integers(100, 20_000, 3)))
    ids = rng.choice(np.arange(1, 10_000), size=7, replace=False).tolist()
    # Above the largest capitalised losses drawn here (20,000/kW on 33.5 kW), so prices stay positive.
    target = float(rng.integers(700_000, 2_000_000))
    size = int(rng.integers(2, 6))
    tied = []
    price = None
    while len(tied) < size:
        if price is None or case % 2:
            losses = [float(x) for x in (rng.integers(200, 3000), rng.integers(2000, 30_000), rng.integers(0, 500))]
            price = _price_for_toc(target, *losses, rates)
        if price is not None:
            tied.append(OfferLosses(ids[len(tied)], str(rng.choice(TIE_NAMES)), price, *losses))
    dearer = [
        OfferLosses(ids[5 + k], f"Dearer {k}", target + float(rng.integers(1, 5000)), *losses)
        for k in range(int(rng.integers(0, 3)))
    ]
    offers = tied + dearer
    return [offers[k] for k in rng.permutation(len(offers))], rates


def test_300_exact_ties_name_the_same_leader_in_every_tool():
    # Reference: rank_offers (TOC, then unit price, then bidder casefolded, then offer id).
    # Every tool, fed the offers in a shuffled order, must name its first offer on a tie.
    rng = np.random.default_rng(2024)
    for case in range(300):
        offers, rates = _tied_case(rng, case)
        a, b, c = rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw
        ranked = rank_offers(offers, rates, 1, 1000.0)
        assert ranked[0].toc_per_unit == ranked[1].toc_per_unit  # the construction really ties
        expected = ranked[0].offer_id
        arrays = OfferArrays.from_offers(offers)

        leader, rivals = split_leader(arrays, rates)
        assert int(leader.offer_ids[0]) == expected
        results = break_even(leader, rivals, rates)
        assert {r.leader_id for r in results} == {expected}
        assert sum(r.margin_now == 0.0 for r in results) == sum(r.toc_per_unit == ranked[0].toc_per_unit
                                                               for r in ranked[1:])
        assert arrays.offer_ids[winner_grid(arrays, [0.0, a], [b], c)[0, 1]] == expected

        base = {"a": a, "b": b, "c": c}
        rows = tornado(base, {"a": (a, a), "b": (b, b)}, _vectorised_direct, arrays)
        assert {(r.leader_id_base, r.leader_id_low, r.leader_id_high) for r in rows} == {(expected,) * 3}

        # Zero spread: every draw is at the base rates; the matrix product's rounding must not
        # hand a draw to another of the tied offers.
        mc = monte_carlo(arrays, base, {"a": {"dist": "fixed"}}, 17, seed=case, rates_fn=_vectorised_direct)
        assert mc.base_leader_id == expected
        assert {o.offer_id: o.win_probability for o in mc.offers}[expected] == 1.0

        # The award ranks its frozen inputs again with the same engine: its default offer is the leader.
        frozen = {"cost_basis": {"no_load_rate_per_kw": a, "load_rate_per_kw": b, "aux_rate_per_kw": c},
                  "lot": {"quantity": 1, "rating_kva": 1000.0},
                  "offers": [{"id": o.offer_id, "bidder": o.bidder, "unit_price": o.unit_price,
                              "no_load_loss_w": o.no_load_loss_w, "load_loss_w": o.load_loss_w,
                              "aux_loss_w": o.aux_loss_w} for o in offers]}
        assert rank_frozen(frozen)[0]["offer_id"] == expected


def test_monte_carlo_settles_ties_in_the_ranking_order_while_other_offers_win_some_draws():
    # Two offers identical but for the bidder's name: they tie in every draw, so the one
    # rank_offers puts first (casefolded "alpha" before "beta", whatever the ids) takes all
    # their wins; a third offer with other losses wins the rest (hand reasoning).
    same = dict(unit_price=100_000.0, no_load_loss_w=1_000.0, load_loss_w=10_000.0, aux_loss_w=100.0)
    offers = [OfferLosses(1, "beta", **same), OfferLosses(2, "Alpha", **same),
              OfferLosses(3, "Lean", 104_000.0, 600.0, 9_000.0, 100.0)]
    result = monte_carlo(OfferArrays.from_offers(offers), BASE, PW_DISTRIBUTIONS, draws=4000, seed=7)
    shares = {o.offer_id: o.win_probability for o in result.offers}
    assert shares[1] == 0.0 and 0.0 < shares[2] < 1.0 and shares[2] + shares[3] == 1.0
    by_id = {o.offer_id: o for o in result.offers}
    assert by_id[1].toc_p50 == by_id[2].toc_p50 and by_id[1].expected_regret == by_id[2].expected_regret


def test_a_tie_that_holds_in_every_draw_goes_to_the_ranking_leader_in_every_draw():
    # Two offers with the same load loss and no auxiliary loss, priced (by _price_for_toc) to
    # tie exactly at the fixed no-load rate: price + A P0 / 1000 is then the same float for both,
    # so they tie bit for bit whatever B is drawn. A third offer wins the draws with B below
    # 1000/kW. Reference: rank_offers on each draw's rates (caught through rates_fn). Invented
    # lots; prices are kept near the capitalised losses so that the matrix product's rounding
    # differs from the ranking's in some of them.
    rng = np.random.default_rng(40)
    for lot in range(300):
        a = float(rng.uniform(100.0, 20_000.0))
        p0 = sorted(float(x) for x in rng.choice(np.arange(200, 3000), 2, replace=False))
        pk = float(rng.integers(2000, 5000))
        tied = [_price_for_toc(70_000.0, loss, pk, 0.0, rates_direct(a, 0.0)) for loss in p0]
        offers = [OfferLosses(5, "Zeta", tied[0], p0[0], pk), OfferLosses(9, "Alpha", tied[1], p0[1], pk),
                  OfferLosses(2, "Lean", 69_500.0 - 0.1 * a, 100.0, pk + 500.0)]
        seen = []

        def rates_fn(inputs):
            seen.append(np.column_stack([inputs["a"], inputs["b"], inputs["c"]]))
            return inputs["a"], inputs["b"], inputs["c"]

        spread = {"b": {"dist": "uniform", "low": 0.0, "high": 2000.0}}
        result = monte_carlo(OfferArrays.from_offers(offers), {"a": a, "b": 1000.0, "c": 0.0}, spread, 10,
                             seed=lot, rates_fn=rates_fn, workers=1)
        leaders = [rank_offers(offers, rates_direct(*row), 1, 1000.0)[0].offer_id for row in np.concatenate(seen[1:])]
        shares = {o.offer_id: o.win_probability for o in result.offers}
        assert shares == {k: leaders.count(k) / 10 for k in (2, 5, 9)}
        assert shares[5] == 0.0  # of the tied two, the lower price (more no-load loss) always leads


# --------------------------------------------------------------------------- break-even


def test_break_even_on_the_published_two_bid_example():
    # Hand calculation, leader B against rival A (d = A - B): d_price = -11,500,
    # dP0 = +6 kW, dPk = +6 kW, dPaux = -0.5 kW; margin 862,658 - 852,012 = 10,646.
    # B* = -(-11,500 + 2450*6 - 756*0.5) / 6 = -470.33 < 0: no load rate ties them.
    # A* = -(-11,500 + 1304*6 - 756*0.5) / 6 = 4054 / 6 = 675.67; B stays ahead above it.
    leader, rivals = split_leader(OfferArrays.from_offers([BID_A, BID_B]), ARTICLE_RATES)
    (result,) = break_even(leader, rivals, ARTICLE_RATES)
    assert (result.leader_id, result.rival_id) == (2, 1)
    assert_allclose(result.margin_now, 10_646.0, rtol=1e-12)
    assert (result.price_gap, result.no_load_loss_gap_w, result.load_loss_gap_w, result.aux_loss_gap_w) == (
        -11_500.0,
        6_000.0,
        6_000.0,
        -500.0,
    )
    assert result.load_rate_tie_per_kw is None and result.load_rate_side is None
    assert_allclose(result.no_load_rate_tie_per_kw, 4054.0 / 6.0, rtol=1e-12)
    assert result.no_load_rate_side == "above"
    assert break_even_sentences([result], "USD") == [
        (
            "No value of the load rate makes these two tie.",
            "The order holds while the no-load rate stays above 676 USD/kW (now 2,450).",
        )
    ]


def test_break_even_below_side_and_sentences():
    # Hand calculation: leader 100,000 + 5*1 + 2*10 (x1000) = 125,000; rival 110,000 + 5 + 16 = 131,000.
    # dPk = -2 kW, so B* = 10,000 / 2 = 5,000 and the leader holds while B stays below it;
    # dP0 = 0, so no no-load rate ties them.
    rates = rates_direct(5000.0, 2000.0, 0.0)
    leader = _offers((10, 100_000.0, 1000.0, 10_000.0, 0.0))
    rivals = _offers((11, 110_000.0, 1000.0, 8_000.0, 0.0))
    (result,) = break_even(leader, rivals, rates)
    assert result.margin_now == 6_000.0
    assert result.load_rate_tie_per_kw == 5_000.0 and result.load_rate_side == "below"
    assert result.no_load_rate_tie_per_kw is None
    assert break_even_sentences([result], "EUR") == [
        (
            "The order holds while the load rate stays below 5,000 EUR/kW (now 2,000).",
            "No value of the no-load rate makes these two tie.",
        )
    ]
    # Seen from the rival, which is behind now, the same tie is where the order would reverse.
    (reverse,) = break_even(rivals, leader, rates)
    assert reverse.load_rate_tie_per_kw == 5_000.0 and reverse.load_rate_side == "above"
    assert break_even_sentences([reverse], "EUR")[0][0] == (
        "The order reverses if the load rate rises above 5,000 EUR/kW (now 2,000)."
    )


def test_break_even_needs_exactly_one_leader():
    offers = _offers((1, 1.0, 1.0, 1.0, 0.0), (2, 2.0, 1.0, 1.0, 0.0))
    with pytest.raises(InvalidInput) as caught:
        break_even(offers, offers, ARTICLE_RATES)
    assert caught.value.field == "leader"


# Whole currency units and whole watts, as tenders state them: a loss gap of 1e-14 W
# would put the tie at 1e21 per kW, where float TOCs can no longer tell the offers apart.
price = st.integers(50_000, 500_000).map(float)
p0_w = st.integers(100, 5_000).map(float)
pk_w = st.integers(1_000, 50_000).map(float)
paux_w = st.integers(0, 2_000).map(float)
rate = st.floats(0.0, 10_000.0)


@st.composite
def two_offers(draw):
    return [
        OfferLosses(offer_id, f"Bidder {offer_id}", draw(price), draw(p0_w), draw(pk_w), draw(paux_w))
        for offer_id in (1, 2)
    ]


def _first_at(offers, a, b, c):
    return rank_offers(offers, CapitalisationRates(a, b, c), 1, 1000.0)[0].offer_id


@given(offers=two_offers(), a=rate, b=rate, c=rate)
def test_break_even_rates_flip_the_order_just_either_side(offers, a, b, c):
    # Re-ranking with rank_offers just beyond each tie: the side reported must be the
    # side where the leader is first (hand algebra: the margin is linear in each rate).
    rates = CapitalisationRates(a, b, c)
    leader, rivals = split_leader(OfferArrays.from_offers(offers), rates)
    (result,) = break_even(leader, rivals, rates)
    lead, rival = result.leader_id, result.rival_id
    for tie, side, at in (
        (result.load_rate_tie_per_kw, result.load_rate_side, lambda x: _first_at(offers, a, x, c)),
        (result.no_load_rate_tie_per_kw, result.no_load_rate_side, lambda x: _first_at(offers, x, b, c)),
    ):
        if tie is None:
            continue
        assert tie >= 0 and side in ("below", "above")
        step = 1e-4 * (1.0 + tie)
        expect_above, expect_below = (lead, rival) if side == "above" else (rival, lead)
        assert at(tie + step) == expect_above
        if tie - step >= 0:
            assert at(tie - step) == expect_below


# --------------------------------------------------------------------------- rate map


bidder_names = st.sampled_from(["Alpha", "alpha", "Beta", "beta", ""])


@st.composite
def tender_offers(draw):
    """2..6 offers from small value sets, so that exact TOC ties happen (as in test_toc.py)."""
    count = draw(st.integers(1, 6))
    ids = draw(st.lists(st.integers(1, 1000), min_size=count, max_size=count, unique=True))
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


grid_axis = st.lists(
    st.sampled_from([0.0, 500.0, 1000.0, 1500.0, 2000.0, 5000.0, 7500.0]), min_size=1, max_size=7
)


@settings(max_examples=40)
@given(
    raw=tender_offers(),
    a_values=grid_axis,
    b_values=grid_axis,
    c_rate=st.sampled_from([0.0, 1000.0]),
    basis=st.tuples(st.floats(0.0, 8000.0), st.floats(0.0, 8000.0)),
    data=st.data(),
)
def test_winner_grid_matches_a_direct_ranking_cell_by_cell(raw, a_values, b_values, c_rate, basis, data):
    # Independent reference: rank_offers at each sampled cell (ties included: the value
    # sets make them common). Chunking down to one cell at a time must not matter.
    offers = OfferArrays.from_offers(raw)
    grid = winner_grid(offers, a_values, b_values, c_rate)
    assert grid.shape == (len(b_values), len(a_values))
    assert np.array_equal(grid, winner_grid(offers, a_values, b_values, c_rate, max_chunk_elements=1))
    for _ in range(5):
        i = data.draw(st.integers(0, len(b_values) - 1))
        j = data.draw(st.integers(0, len(a_values) - 1))
        rates = CapitalisationRates(a_values[j], b_values[i], c_rate)
        assert offers.offer_ids[grid[i, j]] == rank_offers(raw, rates, 1, 630.0)[0].offer_id
    # The winner at the current basis is the deterministic leader.
    a_now, b_now = basis
    at_basis = winner_grid(offers, [0.0, a_now], [b_now], c_rate)[0, 1]
    leader = rank_offers(raw, CapitalisationRates(a_now, b_now, c_rate), 1, 630.0)[0].offer_id
    assert offers.offer_ids[at_basis] == leader


def _segment_set(segments):
    """(start, end, (first, second)) per segment, end points rounded and in order, sorted by pair."""
    rows = []
    for s in segments:
        ends = sorted(
            [
                (round(s.no_load_rate_start_per_kw, 6), round(s.load_rate_start_per_kw, 6)),
                (round(s.no_load_rate_end_per_kw, 6), round(s.load_rate_end_per_kw, 6)),
            ]
        )
        rows.append((ends[0], ends[1], (s.first_index, s.second_index)))
    return sorted(rows, key=lambda row: row[2])


def test_tie_lines_of_three_offers_meeting_at_one_point():
    # Hand calculation. TOC = alpha + A beta + B gamma (beta, gamma in kW):
    # 1: 100,000 + 2 A + 20 B;  2: 115,000 + 1 A + 18 B;  3: 122,500 + 2.5 A + 15 B.
    # All three equal 210,000 at (A, B) = (5000, 5000). Ties: 1-2 on A + 2B = 15,000
    # (offer 2 wins for larger A), 1-3 on B = 4,500 + 0.1 A, 2-3 on B = 2,500 + 0.5 A.
    # Inside 0..10,000: 1-2 from (5000, 5000) to (10000, 2500); 1-3 from (0, 4500) to
    # (5000, 5000); 2-3 from (5000, 5000) to (10000, 7500).
    offers = _offers(
        (1, 100_000.0, 2_000.0, 20_000.0, 0.0),
        (2, 115_000.0, 1_000.0, 18_000.0, 0.0),
        (3, 122_500.0, 2_500.0, 15_000.0, 0.0),
    )
    axis = np.linspace(0.0, 10_000.0, 101)
    grid = winner_grid(offers, axis, axis, 0.0)
    assert (grid[0, 0], grid[50, 100], grid[100, 0]) == (0, 1, 2)  # (A, B) = (0, 0), (10k, 5k), (0, 10k)
    segments = lower_envelope_lines(offers, axis, axis, 0.0, grid)
    expected = [
        ((5000.0, 5000.0), (10000.0, 2500.0), (0, 1)),
        ((0.0, 4500.0), (5000.0, 5000.0), (0, 2)),
        ((5000.0, 5000.0), (10000.0, 7500.0), (1, 2)),
    ]
    got = _segment_set(segments)
    assert [g[2] for g in got] == [e[2] for e in expected]
    assert_allclose([g[:2] for g in got], [e[:2] for e in expected], atol=1e-6)
    for s in segments:
        mid_a = (s.no_load_rate_start_per_kw + s.no_load_rate_end_per_kw) / 2
        mid_b = (s.load_rate_start_per_kw + s.load_rate_end_per_kw) / 2
        toc = offers.toc(mid_a, mid_b, 0.0)
        assert_allclose(toc[s.first_index], toc[s.second_index], rtol=1e-12)
        assert toc[s.first_index] <= toc.min() * (1 + 1e-12)


def test_regions_that_meet_only_across_a_corner_get_no_tie_line():
    # Hand calculation: four planes through 200,000 at (5000, 5000) with gradients
    # (beta, gamma) = (1, 1), (3, 1), (1, 3), (3, 3) kW. The ties are the lines A = 5000
    # and B = 5000, cut at the centre into four segments; (1, 1) and (3, 3), and (3, 1)
    # and (1, 3), touch only at the centre.
    offers = _offers(
        (1, 190_000.0, 1_000.0, 1_000.0, 0.0),
        (2, 180_000.0, 3_000.0, 1_000.0, 0.0),
        (3, 180_000.0, 1_000.0, 3_000.0, 0.0),
        (4, 170_000.0, 3_000.0, 3_000.0, 0.0),
    )
    axis = np.linspace(0.0, 10_000.0, 101)
    segments = lower_envelope_lines(offers, axis, axis, 0.0)
    got = _segment_set(segments)
    assert len(got) == 4
    assert {g[2] for g in got} == {(0, 1), (0, 2), (1, 3), (2, 3)}
    for start, end, _ in got:
        assert (5000.0, 5000.0) in (start, end)
        assert start[0] == end[0] == 5000.0 or start[1] == end[1] == 5000.0


# --------------------------------------------------------------------------- present-worth rates


def test_vectorised_present_worth_rates_equal_the_scalar_function_per_draw():
    # Reference: domain.rates.rates_present_worth, a separate year-by-year table.
    rng = np.random.default_rng(11)
    n = 200
    inputs = dict(
        energy_price_per_kwh=rng.uniform(0.0, 0.3, n),
        energy_escalation=rng.uniform(-0.05, 0.1, n),
        capacity_cost_per_kw_year=rng.uniform(0.0, 200.0, n),
        discount_rate=rng.uniform(-0.02, 0.15, n),
        years=rng.integers(1, 101, n),
        peak_load_pu=rng.uniform(0.0, 1.5, n),
        load_growth=rng.uniform(-0.03, 0.05, n),
        loss_factor=rng.uniform(0.0, 1.0, n),
        responsibility_factor=rng.uniform(0.0, 1.0, n),
        cooling_hours_per_year=rng.uniform(0.0, 8000.0, n),
        hours_per_year=rng.uniform(8000.0, 8784.0, n),
        carbon_cost_per_kwh=rng.uniform(0.0, 0.05, n),
    )
    a, b, c = present_worth_rates_vectorised(inputs)
    for k in range(n):
        one = {name: values[k].item() for name, values in inputs.items()}
        scalar = rates_present_worth(**one)
        assert_allclose(
            [a[k], b[k], c[k]],
            [scalar.no_load_rate_per_kw, scalar.load_rate_per_kw, scalar.aux_rate_per_kw],
            rtol=1e-12,
        )


def test_vectorised_present_worth_rates_scalar_inputs_and_checks():
    # Same scalar function as reference; plain floats come back for scalar inputs.
    expected = rates_present_worth(**BASE)
    a, b, c = present_worth_rates_vectorised(BASE)
    assert isinstance(a, float)
    scalar = [expected.no_load_rate_per_kw, expected.load_rate_per_kw, expected.aux_rate_per_kw]
    assert_allclose([a, b, c], scalar, rtol=1e-12)
    assert present_worth_rates_fn(BASE) == (
        expected.no_load_rate_per_kw,
        expected.load_rate_per_kw,
        expected.aux_rate_per_kw,
    )
    for bad, field in (
        ({"years": [30, 30.5]}, "years"),
        ({"discount_rate": [0.05, math.nan]}, "discount_rate"),
        ({"discount_rate": -1.0}, "discount_rate"),
        ({"cooling_hours_per_year": 9000.0}, "cooling_hours_per_year"),
        ({"typo_rate": 1.0}, "typo_rate"),
    ):
        with pytest.raises(InvalidInput) as caught:
            present_worth_rates_vectorised({**BASE, **bad})
        assert caught.value.field == field
    with pytest.raises(InvalidInput) as caught:
        present_worth_rates_fn({k: v for k, v in BASE.items() if k != "loss_factor"})
    assert caught.value.field == "loss_factor"


# --------------------------------------------------------------------------- tornado


def _direct_rates(inputs):
    return inputs["no_load_rate"], inputs["load_rate"], 0.0


def test_tornado_where_only_the_load_rate_matters():
    # Hand calculation. Equal no-load losses, so only B moves the margin.
    # Leader 100,000 + 5,000 + 10 kW * B; rival 110,000 + 5,000 + 8 kW * B.
    # B = 2000: margin 131,000 - 125,000 = 6,000.  B = 1000: 123,000 - 115,000 = 8,000.
    # B = 7000: 171,000 - 175,000 = -4,000 (the rival leads).  Swing 12,000.
    offers = _offers((10, 100_000.0, 1000.0, 10_000.0, 0.0), (11, 110_000.0, 1000.0, 8_000.0, 0.0))
    base = {"no_load_rate": 5000.0, "load_rate": 2000.0, "unused": 1.0}
    ranges = {"unused": (0.0, 10.0), "no_load_rate": (2500.0, 7500.0), "load_rate": (1000.0, 7000.0)}
    rows = tornado(base, ranges, _direct_rates, offers)
    assert [r.input_name for r in rows] == ["load_rate", "unused", "no_load_rate"]
    top = rows[0]
    margins = (top.margin_base, top.margin_low, top.margin_high, top.swing)
    assert margins == (6_000.0, 8_000.0, -4_000.0, 12_000.0)
    assert (top.leader_id_base, top.leader_id_low, top.leader_id_high) == (10, 10, 11)
    assert (top.leader_changed_low, top.leader_changed_high) == (False, True)
    for row in rows[1:]:
        assert row.swing == 0.0 and row.margin_low == row.margin_high == 6_000.0
        assert not row.leader_changed_low and not row.leader_changed_high


def test_tornado_with_present_worth_rates_keeps_years_whole():
    # Common practice, no source: with equal P0 and Paux only B separates the offers, so
    # inputs that enter A and C alone (cooling hours) do not move the margin.
    seen = []

    def rates_fn(inputs):
        seen.append(inputs["years"])
        return present_worth_rates_fn(inputs)

    offers = _offers((1, 100_000.0, 1000.0, 12_000.0, 300.0), (2, 104_000.0, 1000.0, 10_000.0, 300.0))
    ranges = {"years": (20, 40), "cooling_hours_per_year": (0.0, 4000.0), "loss_factor": (0.15, 0.5)}
    rows = {r.input_name: r for r in tornado(BASE, ranges, rates_fn, offers)}
    assert all(isinstance(y, int) for y in seen) and {20, 30, 40} <= set(seen)
    assert_allclose(rows["cooling_hours_per_year"].swing, 0.0, atol=1e-6)
    # B grows with the loss factor and with the years; 2 kW less load loss gains 2 * dB.
    b_low = rates_present_worth(**{**BASE, "loss_factor": 0.15}).load_rate_per_kw
    b_high = rates_present_worth(**{**BASE, "loss_factor": 0.5}).load_rate_per_kw
    assert_allclose(rows["loss_factor"].swing, 2.0 * (b_high - b_low), rtol=1e-9)
    with pytest.raises(InvalidInput) as caught:
        tornado(BASE, {"years": (20.5, 40)}, rates_fn, offers)
    assert caught.value.field == "years"
    with pytest.raises(InvalidInput):
        tornado(BASE, {"not_an_input": (0, 1)}, rates_fn, offers)


def test_input_range_clips_to_the_nearest_allowed_value():
    # Definitions (common practice, no source): closed bounds clip to themselves, an open low
    # bound to the next float above it, whole numbers to the nearest whole number inside.
    hours = sensitivity.InputRange(0.0, 8760.0)
    assert (hours.clip(-5.0), hours.clip(9600.0), hours.clip(1500.0)) == (0.0, 8760.0, 1500.0)
    rate = sensitivity.InputRange(-0.5, 1.0, low_open=True)
    assert rate.clip(-0.6) == rate.clip(-0.5) == math.nextafter(-0.5, math.inf) and rate.clip(-0.49) == -0.49
    years = sensitivity.InputRange(1.0, 100.0, whole=True)
    assert (years.clip(0.0), years.clip(120.0), years.clip(30.0)) == (1.0, 100.0, 30.0)
    with pytest.raises(InvalidInput):
        sensitivity.InputRange(1.0, 0.0)


# Limits of the cost basis form (server/schemas.py PresentWorthInputs), in fractions.
FORM_LIMITS = {
    "cooling_hours_per_year": sensitivity.InputRange(0.0, 8760.0),
    "loss_factor": sensitivity.InputRange(0.0, 1.0),
    "discount_rate": sensitivity.InputRange(-0.5, 1.0, low_open=True),
    "years": sensitivity.InputRange(1.0, 100.0, whole=True),
}


def test_tornado_holds_each_value_inside_its_input_range_and_says_so():
    # Reference: the same tornado asked at the limits themselves (an independent run through
    # present_worth_rates_fn, which refuses cooling above 8760 h and more than 100 years).
    seen = []

    def rates_fn(inputs):
        seen.append(dict(inputs))
        return present_worth_rates_fn(inputs)

    offers = _offers((1, 100_000.0, 1000.0, 12_000.0, 300.0), (2, 104_000.0, 900.0, 10_000.0, 200.0))
    asked = {"cooling_hours_per_year": (-100.0, 10_000.0), "loss_factor": (0.2, 1.4),
             "discount_rate": (-0.7, 0.1), "years": (0, 120)}
    rows = {r.input_name: r for r in tornado(BASE, asked, rates_fn, offers, limits=FORM_LIMITS)}
    at_limits = {"cooling_hours_per_year": (0.0, 8760.0), "loss_factor": (0.2, 1.0),
                 "discount_rate": (math.nextafter(-0.5, math.inf), 0.1), "years": (1, 100)}
    plain = {r.input_name: r for r in tornado(BASE, at_limits, present_worth_rates_fn, offers)}
    for name, (low, high) in at_limits.items():
        row = rows[name]
        assert (row.low_value, row.high_value) == (low, high)
        assert (row.margin_low, row.margin_high) == (plain[name].margin_low, plain[name].margin_high)
        assert not plain[name].low_clipped and not plain[name].high_clipped
    assert (rows["cooling_hours_per_year"].low_clipped, rows["cooling_hours_per_year"].high_clipped) == (True, True)
    assert (rows["loss_factor"].low_clipped, rows["loss_factor"].high_clipped) == (False, True)
    assert (rows["discount_rate"].low_clipped, rows["discount_rate"].high_clipped) == (True, False)
    assert (rows["years"].low_clipped, rows["years"].high_clipped) == (True, True)
    assert all(isinstance(inputs["years"], int) and 1 <= inputs["years"] <= 100 for inputs in seen)
    assert max(inputs["cooling_hours_per_year"] for inputs in seen) == 8760.0
    # A fraction of a year is refused, not rounded, even where a limit would apply.
    with pytest.raises(InvalidInput) as caught:
        tornado(BASE, {"years": (20.5, 40)}, rates_fn, offers, limits=FORM_LIMITS)
    assert caught.value.field == "years"


# --------------------------------------------------------------------------- Monte Carlo

PW_DISTRIBUTIONS = {
    "energy_price_per_kwh": {"dist": "triangular", "low": 0.06, "mode": 0.09, "high": 0.14},
    "energy_escalation": {"dist": "uniform", "low": 0.0, "high": 0.04},
    "discount_rate": {"dist": "normal", "mean": 0.075, "sd": 0.015, "low": 0.04, "high": 0.11},
    "years": {"dist": "uniform", "low": 25, "high": 35},
    "loss_factor": {"dist": "uniform", "low": 0.2, "high": 0.35},
    "peak_load_pu": {"dist": "triangular", "low": 0.5, "mode": 0.7, "high": 1.0},
}

FIVE_OFFERS = [
    _losses(1, 100_000.0, 1_100.0, 11_000.0, 200.0),
    _losses(2, 108_000.0, 800.0, 10_500.0, 200.0),
    _losses(3, 112_000.0, 900.0, 8_500.0, 150.0),
    _losses(4, 96_000.0, 1_400.0, 12_500.0, 250.0),
    _losses(5, 130_000.0, 700.0, 8_000.0, 100.0),
]


def test_monte_carlo_with_every_input_fixed_is_the_deterministic_ranking():
    # Reference: rank_offers and total_owning_cost at rates_present_worth(BASE).
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    fixed = {name: {"dist": "fixed"} for name in BASE}
    result = monte_carlo(offers, BASE, fixed, draws=501, seed=3)
    rates = rates_present_worth(**BASE)
    leader = rank_offers(FIVE_OFFERS, rates, 1, 1000.0)[0].offer_id
    toc = total_owning_cost(offers.prices, offers.p0_w, offers.pk_w, offers.paux_w, rates).toc_per_unit
    assert result.base_leader_id == leader
    for outcome, plain in zip(result.offers, toc, strict=True):
        assert outcome.win_probability == (1.0 if outcome.offer_id == leader else 0.0)
        assert outcome.toc_p5 == outcome.toc_p50 == outcome.toc_p95
        assert_allclose([outcome.toc_p50, outcome.toc_mean], [plain, plain], rtol=1e-12)
        assert_allclose(outcome.expected_regret, plain - toc.min(), rtol=1e-9, atol=1e-9)
        if outcome.offer_id == leader:
            assert outcome.expected_regret == 0.0


def _recording_rates():
    """Vectorised rates A = a, B = b, C = c that keep every input array it is given.

    monte_carlo calls it first with the base inputs, then with the draws chunk by chunk.
    """
    seen = []

    def rates_fn(inputs):
        seen.append({name: np.array(values) for name, values in inputs.items()})
        return inputs["a"], inputs["b"], inputs["c"]

    return rates_fn, seen


def test_monte_carlo_matches_a_direct_computation_on_the_same_draws():
    # Reference: the whole TOC matrix built directly and numpy's percentile, argmin and mean.
    rng = np.random.default_rng(5)
    n_offers = 37
    offers = OfferArrays(
        offer_ids=np.arange(100, 100 + n_offers),
        prices=rng.uniform(90_000.0, 130_000.0, n_offers),
        p0_w=rng.uniform(600.0, 1_500.0, n_offers),
        pk_w=rng.uniform(7_000.0, 13_000.0, n_offers),
        paux_w=rng.uniform(0.0, 300.0, n_offers),
    )
    base = {"a": 8000.0, "b": 2500.0, "c": 1500.0}
    distributions = {
        "a": {"dist": "triangular", "low": 5000.0, "mode": 8000.0, "high": 12000.0},
        "b": {"dist": "normal", "mean": 2500.0, "sd": 800.0, "low": 500.0, "high": 5000.0},
        "c": {"dist": "uniform", "low": 1000.0, "high": 2000.0},
    }
    rates_fn, seen = _recording_rates()
    draws = 997  # odd, so the percentile positions fall between samples
    result = monte_carlo(
        offers, base, distributions, draws, seed=8, rates_fn=rates_fn, chunk_size=50,
        percentile_block_bytes=8 * draws * 4,
    )
    drawn = {name: np.concatenate([part[name] for part in seen[1:]]) for name in base}  # seen[0]: the base
    assert drawn["a"].size == draws
    toc = offers.toc(drawn["a"][:, None], drawn["b"][:, None], drawn["c"][:, None])[:, 0, :]
    winners = toc.argmin(axis=1)
    shares = np.bincount(winners, minlength=n_offers) / draws
    assert [o.win_probability for o in result.offers] == shares.tolist()
    assert_allclose([o.toc_p5 for o in result.offers], np.percentile(toc, 5, axis=0), rtol=1e-12)
    assert_allclose([o.toc_p50 for o in result.offers], np.percentile(toc, 50, axis=0), rtol=1e-12)
    assert_allclose([o.toc_p95 for o in result.offers], np.percentile(toc, 95, axis=0), rtol=1e-12)
    assert_allclose([o.toc_mean for o in result.offers], toc.mean(axis=0), rtol=1e-12)
    regret = (toc - toc.min(axis=1, keepdims=True)).mean(axis=0)
    assert_allclose([o.expected_regret for o in result.offers], regret, rtol=1e-9, atol=1e-6)
    # Chunk sizes change nothing but the work pattern.
    again = monte_carlo(offers, base, distributions, draws, seed=8, rates_fn=rates_fn)
    assert [o.win_probability for o in again.offers] == [o.win_probability for o in result.offers]
    assert_allclose([o.toc_p50 for o in again.offers], [o.toc_p50 for o in result.offers], rtol=1e-13)


def test_monte_carlo_is_reproducible_by_seed_and_its_shares_add_up():
    # Common practice: a seeded generator gives the same draws; shares of a partition sum to 1.
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    first = monte_carlo(offers, BASE, PW_DISTRIBUTIONS, draws=3000, seed=42)
    assert first == monte_carlo(offers, BASE, PW_DISTRIBUTIONS, draws=3000, seed=42)
    other = monte_carlo(offers, BASE, PW_DISTRIBUTIONS, draws=3000, seed=43)
    assert other != first
    assert [o.toc_p50 for o in other.offers] != [o.toc_p50 for o in first.offers]
    shares = [o.win_probability for o in first.offers]
    assert_allclose(sum(shares), 1.0, rtol=1e-12)
    assert sum(0 < s < 1 for s in shares) >= 2  # the inputs really move the ranking
    for o in first.offers:
        assert o.expected_regret >= 0.0
        assert o.toc_p5 <= o.toc_p50 <= o.toc_p95
        if o.win_probability == 0.0:
            assert o.expected_regret > 0.0


def test_an_offer_that_always_wins_has_zero_regret():
    # Hand reasoning: cheaper and with every loss lower, it wins whatever the rates.
    dominant = _losses(9, 90_000.0, 600.0, 7_000.0, 50.0)
    offers = OfferArrays.from_offers([*FIVE_OFFERS, dominant])
    result = monte_carlo(offers, BASE, PW_DISTRIBUTIONS, draws=2000, seed=1)
    by_id = {o.offer_id: o for o in result.offers}
    assert by_id[9].win_probability == 1.0 and by_id[9].expected_regret == 0.0
    assert all(o.expected_regret > 0 for o in result.offers if o.offer_id != 9)


def test_sampled_inputs_stay_inside_their_distribution_bounds():
    # Definitions of the uniform, triangular and truncated normal: support [low, high];
    # the normal truncated symmetrically keeps its mean (4 standard errors allowed).
    rates_fn, seen = _recording_rates()
    base = {"a": 5000.0, "b": 2000.0, "c": 0.0, "years": 30}
    distributions = {
        "a": {"dist": "uniform", "low": 4000.0, "high": 6000.0},
        "b": {"dist": "triangular", "low": 1000.0, "mode": 1200.0, "high": 3000.0},
        "c": {"dist": "normal", "mean": 500.0, "sd": 300.0, "low": 200.0, "high": 800.0},
        "years": {"dist": "uniform", "low": 20, "high": 40},
    }
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    monte_carlo(offers, base, distributions, draws=20_000, seed=9, rates_fn=rates_fn)
    drawn = {name: np.concatenate([part[name] for part in seen[1:]]) for name in base}
    assert 4000.0 <= drawn["a"].min() and drawn["a"].max() <= 6000.0
    assert 1000.0 <= drawn["b"].min() and drawn["b"].max() <= 3000.0
    assert 200.0 <= drawn["c"].min() and drawn["c"].max() <= 800.0
    assert abs(drawn["c"].mean() - 500.0) < 4 * drawn["c"].std() / math.sqrt(drawn["c"].size)
    # Normal truncated at +-1 sd: variance sd^2 (1 - 2 phi(1) / (2 Phi(1) - 1)) = (0.5396 sd)^2
    # (moments of the truncated normal, e.g. Johnson, Kotz and Balakrishnan, vol. 1, ch. 13);
    # clipping instead of redrawing would pile draws on the bounds and widen it.
    phi_1 = math.exp(-0.5) / math.sqrt(2 * math.pi)
    sd_truncated = 300.0 * math.sqrt(1 - 2 * phi_1 / math.erf(1 / math.sqrt(2)))
    assert_allclose(drawn["c"].std(), sd_truncated, rtol=0.03)
    assert not np.any((drawn["c"] == 200.0) | (drawn["c"] == 800.0))
    # Triangular mean (low + mode + high) / 3 = 1733.3.
    assert abs(drawn["b"].mean() - 5200.0 / 3) < 4 * drawn["b"].std() / math.sqrt(drawn["b"].size)
    years = drawn["years"]
    assert np.array_equal(years, np.rint(years)) and set(np.unique(years).tolist()) == set(range(20, 41))


def test_monte_carlo_progress_and_cancel():
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    # One thread, so one report per chunk; one offer per percentile block.
    small = dict(chunk_size=100, percentile_block_bytes=8 * 1000, workers=1)
    fractions = []
    monte_carlo(offers, BASE, PW_DISTRIBUTIONS, 1000, 0, **small, progress=fractions.append)
    assert fractions == sorted(fractions) and fractions[-1] == 1.0 and len(fractions) > 3
    calls = []

    def stop_on_third_check():
        calls.append(1)
        return len(calls) >= 3

    with pytest.raises(SimulationCancelled):
        monte_carlo(offers, BASE, PW_DISTRIBUTIONS, 1000, 0, **small, should_stop=stop_on_third_check)
    assert len(calls) == 3


def _many_offers(n_offers, seed):
    """Random but plausible offers for a unit of about 1 MVA (as bench/bench_monte_carlo.py)."""
    rng = np.random.default_rng(seed)
    quality = rng.uniform(0.0, 1.0, n_offers)
    return OfferArrays(
        offer_ids=np.arange(1, n_offers + 1),
        prices=95_000.0 + 40_000.0 * quality + rng.normal(0.0, 2_500.0, n_offers),
        p0_w=1400.0 - 700.0 * quality + rng.normal(0.0, 60.0, n_offers),
        pk_w=13000.0 - 5000.0 * quality + rng.normal(0.0, 500.0, n_offers),
        paux_w=rng.uniform(0.0, 300.0, n_offers),
    )


def test_monte_carlo_gives_the_same_result_on_one_thread_or_several():
    # Each chunk writes its own rows and the chunks do not depend on the thread count,
    # so the result must be identical to the last bit; reference for the values:
    # numpy.percentile and argmin on the whole TOC matrix of the same draws.
    offers = _many_offers(60, seed=11)
    draws = 40_000  # more than one chunk of rates (RATE_CHUNK_ELEMENTS)
    small = dict(chunk_size=50, percentile_block_bytes=8 * draws * 7)  # several chunks in every pass
    runs = {}
    for workers in (1, 2, 3):
        fractions = []
        helpers = []

        def count_helpers():
            helpers.append(sum(t.name.startswith("monte_carlo_helper") for t in threading.enumerate()))
            return False

        runs[workers] = monte_carlo(
            offers, BASE, PW_DISTRIBUTIONS, draws, seed=5, **small, workers=workers,
            progress=fractions.append, should_stop=count_helpers,
        )
        assert fractions == sorted(fractions) and fractions[-1] == 1.0
        assert max(helpers) == workers - 1  # the calling thread works too
        if workers == 1:
            assert len(fractions) >= 15  # one report per chunk: 3 of rates, 3 of winners, 9 of percentiles
    assert runs[1] == runs[2] == runs[3]
    assert sum(o.win_probability > 0 for o in runs[2].offers) >= 2

    seen = []

    def recording(inputs):
        rates = present_worth_rates_vectorised(inputs)
        seen.append(np.column_stack(rates))
        return rates

    threaded = monte_carlo(
        offers, BASE, PW_DISTRIBUTIONS, draws, seed=5, rates_fn=recording, **small, workers=2
    )
    rates = np.concatenate(seen[1:])  # seen[0]: the base inputs
    toc = offers.toc(rates[:, 0], rates[:, 1], rates[:, 2])  # (draws, offers)
    shares = np.bincount(toc.argmin(axis=1), minlength=len(offers)) / draws
    assert [o.win_probability for o in threaded.offers] == shares.tolist()
    got = np.array([[o.toc_p5, o.toc_p50, o.toc_p95] for o in threaded.offers])
    assert_allclose(got, np.percentile(toc, [5, 50, 95], axis=0).T, rtol=1e-12)
    assert_allclose([o.toc_p50 for o in runs[2].offers], got[:, 1], rtol=1e-12)


def test_monte_carlo_on_several_threads_stops_when_asked():
    offers = _many_offers(200, seed=11)
    draws = 12_000
    small = dict(chunk_size=50, percentile_block_bytes=8 * draws * 7)
    fractions = []
    calls = []

    def stop_in_the_percentiles():
        # Past 0.3 the percentile pass runs, on two threads.
        calls.append(1)
        return bool(fractions) and fractions[-1] > 0.5

    with pytest.raises(SimulationCancelled):
        monte_carlo(
            offers, BASE, PW_DISTRIBUTIONS, draws, seed=5, **small, workers=2,
            progress=fractions.append, should_stop=stop_in_the_percentiles,
        )
    assert len(calls) == len(fractions) + 1  # no progress once it has been told to stop
    assert 0.5 < fractions[-1] < 1.0
    with pytest.raises(InvalidInput) as caught:
        monte_carlo(offers, BASE, PW_DISTRIBUTIONS, draws, seed=5, workers=0)
    assert caught.value.field == "workers"


def test_an_error_on_a_helper_thread_reaches_the_caller(monkeypatch):
    offers = _many_offers(200, seed=11)
    draws = 12_000
    real = sensitivity._linear_percentiles
    failing_thread = []

    def fails_off_the_calling_thread(block, percentiles):
        if threading.current_thread() is threading.main_thread():
            time.sleep(0.001)  # leave the helper time to start and take a block
            return real(block, percentiles)
        failing_thread.append(threading.current_thread().name)
        raise ArithmeticError("broken block")

    monkeypatch.setattr(sensitivity, "_linear_percentiles", fails_off_the_calling_thread)
    with pytest.raises(ArithmeticError, match="broken block"):
        monte_carlo(
            offers, BASE, PW_DISTRIBUTIONS, draws, seed=5, percentile_block_bytes=8 * draws, workers=2
        )
    assert failing_thread and failing_thread[0].startswith("monte_carlo_helper")
    assert not any(t.name.startswith("monte_carlo_helper") for t in threading.enumerate())


@pytest.mark.parametrize(
    ("distributions", "field"),
    [
        ({"loss_factor": {"dist": "lognormal", "low": 0.1, "high": 0.3}}, "distributions[loss_factor]"),
        ({"loss_factor": {"dist": "uniform", "low": 0.3, "high": 0.1}}, "distributions[loss_factor]"),
        ({"loss_factor": {"dist": "normal", "mean": 0.2, "low": 0.1}}, "distributions[loss_factor]"),
        (
            {"loss_factor": {"dist": "normal", "mean": 0.2, "sd": 0.01, "low": 0.5, "high": 0.6}},
            "distributions[loss_factor]",
        ),
        ({"years": {"dist": "uniform", "low": 20.5, "high": 30}}, "distributions[years].low"),
        ({"los_factor": {"dist": "fixed"}}, "distributions[los_factor]"),
        ({"loss_factor": {"dist": "uniform", "low": 0.5, "high": 1.5}}, "loss_factor"),
    ],
)
def test_monte_carlo_rejects_bad_distributions(distributions, field):
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    with pytest.raises(InvalidInput) as caught:
        monte_carlo(offers, BASE, distributions, 100, 0)
    assert caught.value.field == field


def test_check_distributions_refuses_without_drawing_what_monte_carlo_refuses():
    # Same cases as test_monte_carlo_rejects_bad_distributions (the reference is monte_carlo itself).
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    for distributions in (
        {"loss_factor": {"dist": "normal", "mean": 0.2, "sd": 0.01, "low": 0.5, "high": 0.6}},
        {"years": {"dist": "uniform", "low": 20.5, "high": 30}},
        {"los_factor": {"dist": "fixed"}},
    ):
        with pytest.raises(InvalidInput) as expected:
            monte_carlo(offers, BASE, distributions, 100, 0)
        with pytest.raises(InvalidInput) as caught:
            sensitivity.check_distributions(BASE, distributions)
        assert caught.value.field == expected.value.field
    sensitivity.check_distributions(BASE, PW_DISTRIBUTIONS)  # accepted as monte_carlo accepts it


@pytest.mark.parametrize("draws", [1, 2, 3, 20, 101])
def test_monte_carlo_percentiles_for_few_draws_match_numpy(draws):
    # Reference: numpy.percentile (default "linear", Hyndman and Fan definition 7).
    rates_fn, seen = _recording_rates()
    base = {"a": 6000.0, "b": 2000.0, "c": 500.0}
    distributions = {"b": {"dist": "uniform", "low": 500.0, "high": 5000.0}}
    offers = OfferArrays.from_offers(FIVE_OFFERS)
    result = monte_carlo(offers, base, distributions, draws, seed=4, rates_fn=rates_fn)
    drawn = {name: np.concatenate([part[name] for part in seen[1:]]) for name in base}
    toc = offers.toc(drawn["a"][:, None], drawn["b"][:, None], drawn["c"][:, None])[:, 0, :]
    got = np.array([[o.toc_p5, o.toc_p50, o.toc_p95] for o in result.offers])
    assert_allclose(got, np.percentile(toc, [5, 50, 95], axis=0).T, rtol=1e-12)
