"""Fleet loss costing, typical losses, right-sizing and the replacement shortlist.

Each check names its source: "hand calculation" (worked in the comment beside it),
numpy-financial (`npf.npv`, `npf.pv`), a plain Python loop over the years, domain.finance
(a term-by-term sum), docs/references.md (each entry with its own status), or "common practice, no source".
"""

from __future__ import annotations

import math

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from numpy.testing import assert_allclose, assert_array_equal

from domain.errors import InvalidInput
from domain.finance import present_worth_of_growing_series
from domain.fleet import (
    DEFAULT_TYPICAL_LOSSES,
    DRY,
    LIQUID,
    STANDARD_RATINGS_KVA,
    FleetArrays,
    TypicalLossTable,
    annual_losses,
    estimate_losses,
    fill_missing_losses,
    group_totals,
    growing_annuity_present_worth,
    limit_losses_by_rating,
    loading_findings,
    right_sized_rating,
    shortlist,
)
from domain.limits import BUILT_IN

BASIS = dict(
    energy_price_per_kwh=0.10,
    capacity_cost_per_kw_year=80.0,
    responsibility_factor=0.8,
    carbon_price_per_t=50.0,
    emission_factor_t_per_mwh=0.4,
)  # carbon cost 50 * 0.4 / 1000 = 0.02 per kWh


def fleet_of(units: list[dict]) -> FleetArrays:
    """A small fleet from one dict per unit (invented values)."""
    columns = ("rating_kva", "phases", "insulation", "year_installed", "no_load_loss_w", "load_loss_w",
               "peak_load_pu", "loss_factor")
    return FleetArrays(**{name: [u[name] for u in units] for name in columns})


def unit(**overrides) -> dict:
    base = dict(rating_kva=400.0, phases=3, insulation=LIQUID, year_installed=2000, no_load_loss_w=500.0,
                load_loss_w=5000.0, peak_load_pu=0.8, loss_factor=0.3)
    return {**base, **overrides}


HAND_FLEET = [
    unit(),  # A
    unit(rating_kva=100.0, insulation=DRY, no_load_loss_w=280.0, load_loss_w=2050.0, peak_load_pu=0.5,
         loss_factor=0.2),  # B
    unit(rating_kva=160.0, no_load_loss_w=100.0, load_loss_w=1000.0, peak_load_pu=0.0, loss_factor=0.25),  # C
]


# --------------------------------------------------------------------------- annual losses


def test_annual_losses_of_a_small_fleet_by_hand():
    result = annual_losses(fleet_of(HAND_FLEET), **BASIS)
    # Hand calculation, price + carbon = 0.12 per kWh, SC 80, RF 0.8:
    # A: E0 = 0.5 kW * 8760 = 4380; Ek = 5 * 0.8**2 * 0.3 * 8760 = 8409.6;
    #    cost = 0.12 * 12789.6 + 80 * (0.5 + 0.8 * 3.2) = 1534.752 + 244.8 = 1779.552;
    #    CO2 = 12.7896 MWh * 0.4 = 5.11584 t.
    # B: E0 = 0.28 * 8760 = 2452.8; Ek = 2.05 * 0.25 * 0.2 * 8760 = 897.9;
    #    cost = 0.12 * 3350.7 + 80 * (0.28 + 0.8 * 0.5125) = 402.084 + 55.2 = 457.284; CO2 = 1.34028 t.
    # C: no load: E0 = 876, Ek = 0; cost = 0.12 * 876 + 80 * 0.1 = 113.12; CO2 = 0.3504 t.
    assert_allclose(result["no_load_energy_kwh"], [4380.0, 2452.8, 876.0], rtol=1e-12)
    assert_allclose(result["load_energy_kwh"], [8409.6, 897.9, 0.0], rtol=1e-12)
    assert_allclose(result["loss_cost"], [1779.552, 457.284, 113.12], rtol=1e-12)
    assert_allclose(result["co2_t"], [5.11584, 1.34028, 0.3504], rtol=1e-12)


def test_annual_losses_without_carbon_cost_no_carbon_and_no_emissions():
    result = annual_losses(fleet_of(HAND_FLEET[:1]), 0.10, 80.0, 0.8)
    # Hand calculation: unit A at 0.10 per kWh: 0.10 * 12789.6 + 244.8 = 1523.76.
    assert_allclose(result["loss_cost"], [1523.76], rtol=1e-12)
    assert_array_equal(result["co2_t"], [0.0])


def test_annual_losses_let_a_missing_loss_through_as_nan_for_that_unit_only():
    # Domain convention (domain/__init__.py): element-wise formulas let NaN through.
    fleet = fleet_of([unit(), unit(no_load_loss_w=float("nan"))])
    cost = annual_losses(fleet, **BASIS)["loss_cost"]
    assert_allclose(cost[0], 1779.552, rtol=1e-12)  # hand calculation above
    assert math.isnan(cost[1])


def test_fleet_totals_equal_the_sum_of_units_and_group_by_insulation():
    result = annual_losses(fleet_of(HAND_FLEET), **BASIS)
    totals = group_totals(result, np.array([LIQUID, DRY, LIQUID]))
    # Hand calculation: liquid A + C = 1779.552 + 113.12; dry B = 457.284; all three 2349.956.
    assert_allclose(totals["loss_cost"], [1892.672, 457.284], rtol=1e-12)
    assert_array_equal(totals["units"], [2, 1])
    assert_allclose(totals["loss_cost"].sum(), 2349.956, rtol=1e-12)
    assert_allclose(totals["co2_t"].sum(), result["co2_t"].sum(), rtol=1e-12)


@given(
    data=st.data(),
    n_units=st.integers(min_value=0, max_value=300),
    n_groups=st.integers(min_value=1, max_value=12),
)
def test_grouping_loses_no_unit(data, n_units, n_groups):
    # Common practice, no source: each unit is in exactly one group, so group totals add up.
    keys = data.draw(hnp.arrays(np.int64, n_units, elements=st.integers(0, n_groups - 1)))
    values = data.draw(hnp.arrays(np.float64, n_units, elements=st.floats(0.0, 1e6)))
    totals = group_totals({"loss_cost": values}, keys, n_groups=n_groups)
    assert totals["units"].sum() == n_units
    assert totals["loss_cost"].shape == (n_groups,)
    assert_allclose(totals["loss_cost"].sum(), values.sum(), rtol=1e-12, atol=1e-9)
    for group in range(n_groups):
        assert_allclose(totals["loss_cost"][group], values[keys == group].sum(), rtol=1e-12, atol=1e-9)


def test_group_totals_refuse_what_would_lose_or_hide_units():
    # Common practice, no source: a NaN would hide a missing loss in a total.
    with pytest.raises(InvalidInput) as nan:
        group_totals({"loss_cost": [1.0, np.nan]}, np.array([0, 1]))
    assert nan.value.field == "loss_cost"
    with pytest.raises(InvalidInput, match="group codes"):
        group_totals({"loss_cost": [1.0, 2.0]}, np.array([0, -1]))
    with pytest.raises(InvalidInput, match="n_groups"):
        group_totals({"loss_cost": [1.0, 2.0]}, np.array([0, 3]), n_groups=3)
    with pytest.raises(InvalidInput, match="one element per key"):
        group_totals({"loss_cost": [1.0, 2.0, 3.0]}, np.array([0, 1]))
    with pytest.raises(InvalidInput, match="whole-number"):
        group_totals({"loss_cost": [1.0]}, np.array([0.5]))
    assert_array_equal(group_totals({"x": [1.0]}, np.array([2]))["x"], [0.0, 0.0, 1.0])  # empty groups total 0


# --------------------------------------------------------------------------- fleet arrays


def test_fleet_arrays_check_their_columns_and_keep_private_read_only_copies():
    ratings = np.array([400.0, 100.0])
    fleet = FleetArrays(ratings, [3, 1], [0, 1], [1990, 2010], [500.0, np.nan], [5000.0, 2000.0],
                        [0.8, 0.4], [0.3, 0.2])
    ratings[0] = 1.0
    assert fleet.rating_kva[0] == 400.0
    with pytest.raises(ValueError):
        fleet.rating_kva[0] = 1.0
    assert len(fleet) == 2
    assert not fleet.estimated_no_load.any() and fleet.estimated_load.dtype == bool
    assert_allclose(fleet.peak_load_kva, [320.0, 40.0])

    good = dict(rating_kva=[400.0], phases=[3], insulation=[0], year_installed=[1990], no_load_loss_w=[500.0],
                load_loss_w=[5000.0], peak_load_pu=[0.8], loss_factor=[0.3])
    for field, bad in [("rating_kva", [0.0]), ("phases", [2]), ("insulation", [2]), ("year_installed", [1990.5]),
                       ("no_load_loss_w", [-1.0]), ("peak_load_pu", [np.inf]), ("loss_factor", [1.5]),
                       ("load_loss_w", [5000.0, 1.0])]:
        with pytest.raises(InvalidInput) as error:
            FleetArrays(**{**good, field: bad})
        assert error.value.field == field


# --------------------------------------------------------------------------- typical losses


def test_default_table_newest_band_is_eu_tier_1_and_older_vintages_are_lossier():
    # docs/references.md R6 (values from memory): EU Tier 1 liquid 630 kVA P0 600 W, Pk 6500 W;
    # dry 1000 kVA P0 1550 W, Pk 9000 W. The default holds them for units from 2015.
    p0, pk = estimate_losses([630.0, 1000.0], [2020, 2020], [LIQUID, DRY])
    assert_array_equal(p0, [600.0, 1550.0])
    assert_array_equal(pk, [6500.0, 9000.0])
    # Common practice, no source: at every rating an older vintage loses at least as much.
    ratings = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    for insulation in (LIQUID, DRY):
        by_vintage = [estimate_losses(ratings, year, insulation) for year in (1960, 1985, 2005, 2020)]
        for older, newer in zip(by_vintage, by_vintage[1:]):
            assert np.all(older[0] > newer[0]) and np.all(older[1] >= newer[1])
    assert "not from a standard" in DEFAULT_TYPICAL_LOSSES.source
    assert DEFAULT_TYPICAL_LOSSES.status == "illustrative"


def test_estimated_losses_interpolate_in_rating_and_scale_beyond_the_table():
    # Hand calculation on the default table (Tier 1 liquid x the 1975-1994 factors 1.5 / 1.2):
    # 400 kVA from 1980: P0 = 430 * 1.5 = 645 W, Pk = 4600 * 1.2 = 5520 W.
    p0, pk = estimate_losses(400.0, 1980, LIQUID)
    assert (p0, pk) == (645.0, 5520.0)
    # Halfway between 400 kVA (430, 4600) and 500 kVA (510, 5500), newest band: (470, 5050).
    assert_allclose(estimate_losses(450.0, 2020, LIQUID), (470.0, 5050.0), rtol=1e-12)
    # Above the last row (3150 kVA: 2200, 27500 W): scaled by (5000 / 3150)**0.75.
    scale = (5000.0 / 3150.0) ** 0.75
    assert_allclose(estimate_losses(5000.0, 2020, LIQUID), (2200.0 * scale, 27500.0 * scale), rtol=1e-12)


def test_nearest_vintage_band_rule():
    rows = [(LIQUID, 1960, 1969, 100.0, 300.0, 2000.0), (LIQUID, 1981, 1990, 100.0, 200.0, 1500.0)]
    table = TypicalLossTable("two bands with a gap", "invented for the test", tuple(rows))
    years = [1940, 1965, 1974, 1975, 1976, 2030]
    p0, _ = estimate_losses(100.0, years, LIQUID, table)
    # Hand: 1940 and 1965 -> older band; 1974 is 5 years from the older and 7 from the newer band;
    # 1975 is 6 from each (tie -> newer); 1976 is nearer the newer; 2030 after both -> newer.
    assert_array_equal(p0, [300.0, 300.0, 300.0, 200.0, 200.0, 200.0])


def test_typical_loss_table_refuses_ambiguous_rows_and_missing_insulation():
    row = (LIQUID, 1960, 1969, 100.0, 300.0, 2000.0)
    with pytest.raises(InvalidInput, match="twice"):
        TypicalLossTable("t", "s", (row, row))
    with pytest.raises(InvalidInput, match="overlaps"):
        TypicalLossTable("t", "s", (row, (LIQUID, 1965, 1980, 100.0, 250.0, 1800.0)))
    with pytest.raises(InvalidInput):
        TypicalLossTable("t", "s", ((LIQUID, 1970, 1960, 100.0, 300.0, 2000.0),))
    liquid_only = TypicalLossTable("liquid only", "s", (row,))
    with pytest.raises(InvalidInput) as error:
        estimate_losses([100.0, 100.0], 1965, [LIQUID, DRY], liquid_only)
    assert error.value.field == "insulation"


def test_missing_losses_are_filled_and_flagged_each_on_its_own():
    nan = float("nan")
    fleet = fleet_of([
        unit(),
        unit(no_load_loss_w=nan, year_installed=1980),
        unit(load_loss_w=nan, year_installed=1980),
        unit(no_load_loss_w=nan, load_loss_w=nan, year_installed=2020, rating_kva=450.0),
    ])
    filled = fill_missing_losses(fleet)
    assert_array_equal(filled.estimated_no_load, [False, True, False, True])
    assert_array_equal(filled.estimated_load, [False, False, True, True])
    # Known values unchanged; typical values by hand as in the test above.
    assert_array_equal(filled.no_load_loss_w, [500.0, 645.0, 500.0, 470.0])
    assert_allclose(filled.load_loss_w, [5000.0, 5000.0, 5520.0, 5050.0], rtol=1e-12)
    assert np.isnan(fleet.no_load_loss_w[1])  # the input fleet is not changed
    # Filling again estimates nothing more and keeps the flags.
    again = fill_missing_losses(filled)
    assert_array_equal(again.estimated_no_load, filled.estimated_no_load)


# --------------------------------------------------------------------------- loading and sizing


def test_loading_findings_masks():
    # Common practice, no source: planner limits 1.0 pu (overloaded above) and 0.3 pu (oversized below).
    found = loading_findings([0.2, 0.3, 0.5, 1.0, 1.2, np.nan])
    assert_array_equal(found.overloaded, [False, False, False, False, True, False])
    assert_array_equal(found.oversized, [True, False, False, False, False, False])
    strict = loading_findings([0.95, 0.45], max_loading_pu=0.9, min_loading_pu=0.5)
    assert_array_equal(strict.overloaded, [True, False])
    assert_array_equal(strict.oversized, [False, True])


def test_right_sized_rating_by_hand():
    # Hand calculation: 300 kVA growing 2 % a year for 10 years is 365.70 kVA; at 0.9 pu it needs
    # 406.33 kVA -> 500 kVA. 3000 kVA needs more than the largest standard rating -> NaN.
    assert right_sized_rating(300.0, load_growth=0.02, years=10, max_loading_pu=0.9) == 500.0
    assert right_sized_rating(400.0, load_growth=0.0, years=10, max_loading_pu=1.0) == 400.0
    sized = right_sized_rating([0.0, 3000.0, np.nan], load_growth=0.0, years=0, max_loading_pu=1.0)
    assert sized[0] == 25.0 and np.isnan(sized[1]) and np.isnan(sized[2])
    with pytest.raises(InvalidInput) as error:
        right_sized_rating(300.0, load_growth=0.0, years=10, max_loading_pu=1.2)
    assert error.value.field == "max_loading_pu"


@given(
    peak_kva=hnp.arrays(np.float64, st.integers(1, 50), elements=st.floats(0.0, 2600.0)),
    growth=st.floats(-0.05, 0.10),
    years=st.integers(0, 30),
    max_loading=st.floats(0.3, 1.0),
)
def test_right_sized_rating_never_below_the_grown_peak(peak_kva, growth, years, max_loading):
    # Common practice, no source: the new unit carries the grown peak within the planner's loading,
    # and the next smaller standard rating would not.
    ratings = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    sized = right_sized_rating(peak_kva, ratings, load_growth=growth, years=years, max_loading_pu=max_loading)
    grown = peak_kva * (1.0 + growth) ** years
    fits = ~np.isnan(sized)
    assert np.all(sized[fits] >= grown[fits])
    assert np.all(sized[fits] * max_loading >= grown[fits] * (1 - 1e-12))
    assert np.all(grown[~fits] / max_loading > ratings[-1] * (1 - 1e-12))
    smaller = np.searchsorted(ratings, sized[fits]) - 1
    has_smaller = smaller >= 0
    assert np.all(ratings[smaller[has_smaller]] * max_loading < grown[fits][has_smaller] * (1 + 1e-12))


def test_limit_losses_by_rating_is_a_unit_just_meeting_the_table():
    # docs/references.md R6 (from memory): EU Tier 2 liquid 250 kVA P0 270 W, Pk 2350 W;
    # 2500 kVA P0 1575 W, Pk 18500 W. The dry table starts at 50 kVA: no limit at 25 kVA.
    tier_2 = {t.insulation: t for t in BUILT_IN if t.key == "eu-tier-2" and t.kind == "max_losses"}
    p0, pk = limit_losses_by_rating(tier_2["liquid"], [250.0, 2500.0])
    assert_array_equal(p0, [270.0, 1575.0])
    assert_array_equal(pk, [2350.0, 18500.0])
    dry_p0, _ = limit_losses_by_rating(tier_2["dry"], [25.0, 50.0])
    assert np.isnan(dry_p0[0]) and dry_p0[1] == 180.0
    with pytest.raises(InvalidInput):
        limit_losses_by_rating(next(t for t in BUILT_IN if t.kind == "min_efficiency"))


# --------------------------------------------------------------------------- present worth


@pytest.mark.parametrize(("rate", "growth"), [(0.06, 0.0), (0.06, 0.03), (0.05, 0.05), (0.0, 0.0),
                                              (0.08, 0.12), (0.07, 0.07 + 1e-12), (-0.02, 0.01)])
def test_growing_annuity_matches_a_term_by_term_sum_and_numpy_financial(rate, growth):
    years = np.array([0, 1, 2, 15, 40])
    closed = growing_annuity_present_worth(rate, growth, years)
    # domain.finance sums term by term (n >= 1); a plain loop covers n = 0 as well.
    for n, value in zip(years, closed):
        loop = sum((1 + growth) ** (t - 1) / (1 + rate) ** t for t in range(1, n + 1))
        assert_allclose(value, loop, rtol=1e-11, atol=1e-15)
        if n:
            assert_allclose(value, present_worth_of_growing_series(rate, int(n), growth), rtol=1e-11)
            # numpy-financial: npv of the flows (0, 1, 1+g, ..., (1+g)**(n-1)).
            flows = [0.0] + [(1 + growth) ** (t - 1) for t in range(1, n + 1)]
            assert_allclose(value, npf.npv(rate, flows), rtol=1e-11)


def test_growing_annuity_when_growth_equals_the_discount_rate():
    # Hand calculation: each term is 1 / (1 + i), so PW = n / (1 + i) = 20 / 1.05.
    assert growing_annuity_present_worth(0.05, 0.05, 20) == pytest.approx(20 / 1.05, rel=1e-15)


# --------------------------------------------------------------------------- shortlist

TIER_2_LIQUID = next(t for t in BUILT_IN if t.key == "eu-tier-2" and t.kind == "max_losses"
                     and t.insulation == "liquid")
TIER_2_DRY = next(t for t in BUILT_IN if t.key == "eu-tier-2" and t.kind == "max_losses" and t.insulation == "dry")


def by_rating() -> dict:
    liquid, dry = limit_losses_by_rating(TIER_2_LIQUID), limit_losses_by_rating(TIER_2_DRY)
    price = 4000.0 + 18.0 * np.asarray(STANDARD_RATINGS_KVA, dtype=float)  # invented price list
    return dict(no_load_loss_w_by_rating=np.vstack([liquid[0], dry[0]]),
                load_loss_w_by_rating=np.vstack([liquid[1], dry[1]]),
                replacement_cost_by_rating=np.vstack([price, 1.3 * price]))


def test_an_oversized_old_unit_has_a_positive_npv_recomputed_by_hand():
    # Existing: liquid 1000 kVA from 2000, P0 1900 W, Pk 12000 W, peak 0.2 pu (200 kVA), LsF 0.3.
    # No growth, sizing at 1.0 pu -> 250 kVA, a unit just meeting EU Tier 2 (P0 270 W, Pk 2350 W;
    # EU 548/2014 as amended by 2019/1783, Annex I [from memory]).
    fleet = fleet_of([unit(rating_kva=1000.0, year_installed=2000, no_load_loss_w=1900.0, load_loss_w=12000.0,
                           peak_load_pu=0.2, loss_factor=0.3)])
    result = shortlist(
        fleet, energy_price_per_kwh=0.10, capacity_cost_per_kw_year=80.0, responsibility_factor=0.8,
        discount_rate=0.05, reference_year=2025, service_life_years=40, sizing_years=10,
        no_load_loss_w_by_rating=limit_losses_by_rating(TIER_2_LIQUID)[0],
        load_loss_w_by_rating=limit_losses_by_rating(TIER_2_LIQUID)[1],
        replacement_cost=6000.0, installation_cost=1500.0, salvage_value=2000.0,
    )
    # Hand calculation, 0.10 * 8760 = 876 per kW-year of energy, SC 80, RF 0.8:
    # existing: L = 12 kW * 0.2**2 = 0.48 kW; cost = 876 * (1.9 + 0.3 * 0.48) + 80 * (1.9 + 0.8 * 0.48)
    #           = 1790.544 + 182.72 = 1973.264;
    # new: pu = 200 / 250 = 0.8, L = 2.35 * 0.64 = 1.504 kW; cost = 876 * (0.27 + 0.3 * 1.504)
    #      + 80 * (0.27 + 0.8 * 1.504) = 631.7712 + 117.856 = 749.6272;
    # saving = 1223.6368 a year; net cost = 6000 + 1500 - 2000 = 5500; remaining life 40 - 25 = 15 years.
    assert result.right_sized_rating_kva[0] == 250.0
    assert_allclose(result.candidate_peak_load_pu, [0.8], rtol=1e-12)
    assert_allclose(result.existing_loss_cost, [1973.264], rtol=1e-12)
    assert_allclose(result.candidate_loss_cost, [749.6272], rtol=1e-12)
    assert_allclose(result.annual_saving, [1223.6368], rtol=1e-12)
    assert_array_equal(result.years_evaluated, [15])
    # numpy-financial: a level saving for 15 years at 5 % is worth saving * pv(0.05, 15, -1) = x 10.3797.
    expected_npv = 1223.6368 * npf.pv(0.05, 15, -1.0) - 5500.0
    assert_allclose(result.npv, [expected_npv], rtol=1e-12)
    assert result.npv[0] > 7000.0
    assert_allclose(result.simple_payback_years, [5500.0 / 1223.6368], rtol=1e-12)  # 4.49 years


def _npv_by_plain_loop(u: dict, new: dict, terms: dict) -> tuple[float, list[float]]:
    """Independent year-by-year cash flows of replacing one unit (docs/references.md R3 conventions)."""
    carbon = terms["carbon_price_per_t"] * terms["emission_factor_t_per_mwh"] / 1000.0
    age = terms["reference_year"] - u["year_installed"]
    n = max(terms["service_life_years"] - age, 0)
    if terms.get("horizon_years") is not None:
        n = min(n, terms["horizon_years"])

    def cost(p0_w, pk_w, pu, t):
        price = terms["energy_price_per_kwh"] * (1 + terms["energy_escalation"]) ** (t - 1)
        peak = pu * (1 + terms["load_growth"]) ** (t - 1)
        load_kw = pk_w / 1000 * peak**2
        energy = 8760 * (p0_w / 1000 + u["loss_factor"] * load_kw)
        return (price + carbon) * energy + terms["capacity_cost_per_kw_year"] * (
            p0_w / 1000 + terms["responsibility_factor"] * load_kw)

    new_pu = u["peak_load_pu"] * u["rating_kva"] / new["rating_kva"]
    flows = [-(new["cost"] + terms["installation_cost"] - terms["salvage_value"])]
    for t in range(1, n + 1):
        flows.append(cost(u["no_load_loss_w"], u["load_loss_w"], u["peak_load_pu"], t)
                     - cost(new["no_load_loss_w"], new["load_loss_w"], new_pu, t))
    npv = sum(flow / (1 + terms["discount_rate"]) ** t for t, flow in enumerate(flows))
    return npv, flows


@pytest.mark.parametrize("horizon", [None, 8])
@pytest.mark.parametrize(("rate", "escalation", "growth"), [(0.06, 0.025, 0.015), (0.04, 0.04, 0.0),
                                                          (0.0, 0.0, 0.0), (0.07, -0.01, 0.03)])
def test_shortlist_npv_and_payback_match_a_plain_loop_and_numpy_financial(rate, escalation, growth, horizon):
    units = [
        unit(rating_kva=630.0, year_installed=1985, no_load_loss_w=1200.0, load_loss_w=8000.0, peak_load_pu=0.3),
        unit(rating_kva=250.0, year_installed=2010, no_load_loss_w=400.0, load_loss_w=3800.0, peak_load_pu=1.1,
             loss_factor=0.35),
        unit(rating_kva=100.0, insulation=DRY, year_installed=1995, no_load_loss_w=420.0, load_loss_w=2400.0,
             peak_load_pu=0.6, loss_factor=0.2),
        unit(rating_kva=400.0, year_installed=1975, peak_load_pu=0.5),  # beyond its service life: n = 0
        unit(rating_kva=160.0, year_installed=2024, no_load_loss_w=189.0, load_loss_w=1750.0, peak_load_pu=0.9),
    ]
    terms = dict(energy_price_per_kwh=0.09, capacity_cost_per_kw_year=70.0, responsibility_factor=0.75,
                 carbon_price_per_t=60.0, emission_factor_t_per_mwh=0.3, discount_rate=rate,
                 energy_escalation=escalation, load_growth=growth, reference_year=2025, service_life_years=40,
                 sizing_years=5, max_loading_pu=0.9, installation_cost=1500.0, salvage_value=300.0,
                 horizon_years=horizon)
    tables = by_rating()
    result = shortlist(fleet_of(units), **terms, **tables)
    ratings = list(STANDARD_RATINGS_KVA)
    for k, u in enumerate(units):
        rating = result.right_sized_rating_kva[k]
        column = ratings.index(rating)
        new = dict(rating_kva=rating, no_load_loss_w=tables["no_load_loss_w_by_rating"][u["insulation"], column],
                   load_loss_w=tables["load_loss_w_by_rating"][u["insulation"], column],
                   cost=tables["replacement_cost_by_rating"][u["insulation"], column])
        npv, flows = _npv_by_plain_loop(u, new, terms)
        # Plain loop over the years, and numpy-financial's npv of the same flows (t = 0..n).
        assert_allclose(result.npv[k], npv, rtol=1e-10, atol=1e-8)
        assert_allclose(result.npv[k], npf.npv(rate, flows), rtol=1e-10, atol=1e-8)
        assert len(flows) - 1 == result.years_evaluated[k]
        if len(flows) > 1:
            assert_allclose(result.annual_saving[k], flows[1], rtol=1e-12)
            # Hand definition: simple payback = net cost / first-year saving (inf when no saving).
            expected = -flows[0] / flows[1] if flows[1] > 0 else math.inf
            assert_allclose(result.simple_payback_years[k], expected, rtol=1e-12)
    assert result.years_evaluated[3] == 0 and result.npv[3] == pytest.approx(result.net_cost[3] * -1.0)


def test_shortlist_existing_cost_is_the_annual_loss_cost():
    # Same formula, two entry points (common practice, no source: one cost definition).
    fleet = fleet_of(HAND_FLEET)
    result = shortlist(fleet, **BASIS, discount_rate=0.06, reference_year=2025, service_life_years=40,
                       sizing_years=0, **by_rating())
    assert_allclose(result.existing_loss_cost, annual_losses(fleet, **BASIS)["loss_cost"], rtol=1e-12)
    # Hand calculation: year-1 CO2 saved = energy saved [MWh] * 0.4 t/MWh.
    energy_saved_kwh = (result.existing_loss_cost - result.candidate_loss_cost
                        - 80.0 * ((fleet.no_load_loss_w - result.candidate_no_load_loss_w) / 1000
                                  + 0.8 * (fleet.load_loss_w * fleet.peak_load_pu**2
                                           - result.candidate_load_loss_w * result.candidate_peak_load_pu**2) / 1000)
                        ) / 0.12
    assert_allclose(result.co2_saving_t, energy_saved_kwh / 1000 * 0.4, rtol=1e-9)


def test_per_unit_candidates_give_the_same_result_as_the_table_by_rating():
    fleet = fleet_of(HAND_FLEET)
    common = dict(**BASIS, discount_rate=0.06, reference_year=2025, service_life_years=40, sizing_years=5,
                  energy_escalation=0.02, load_growth=0.01, max_loading_pu=0.8)
    tables = by_rating()
    from_table = shortlist(fleet, **common, **tables)
    per_unit = shortlist(fleet, **common, candidate_no_load_loss_w=from_table.candidate_no_load_loss_w,
                         candidate_load_loss_w=from_table.candidate_load_loss_w,
                         replacement_cost=from_table.net_cost)
    assert_allclose(per_unit.npv, from_table.npv, rtol=1e-12)
    # The dry unit (B) takes the dry row: EU Tier 2 dry at its right-sized rating (EU 548/2014 as
    # amended, Annex I [from memory]).
    b_rating = from_table.right_sized_rating_kva[1]
    p0_dry, _ = limit_losses_by_rating(TIER_2_DRY, [b_rating])
    assert from_table.candidate_no_load_loss_w[1] == p0_dry[0]


def test_shortlist_order_is_by_npv_descending_with_nan_last():
    units = [unit(year_installed=y, no_load_loss_w=p0, peak_load_pu=pu)
             for y, p0, pu in [(1990, 900.0, 0.5), (2020, 430.0, 0.5), (1990, 1500.0, 0.4), (1990, 900.0, 0.5),
                               (2000, 700.0, 6.0)]]  # the last needs more than 2500 kVA: no candidate
    result = shortlist(fleet_of(units), **BASIS, discount_rate=0.06, reference_year=2025, service_life_years=40,
                       sizing_years=10, load_growth=0.02, **by_rating())
    assert sorted(result.order) == list(range(5))
    assert np.isnan(result.npv[4]) and result.order[-1] == 4
    ranked = result.npv[result.order[:-1]]
    assert np.all(np.diff(ranked) <= 0)
    assert list(result.order).index(0) < list(result.order).index(3)  # equal NPV: fleet order kept


def test_shortlist_order_keeps_fleet_order_among_equal_npvs():
    # Common practice, no source: a ranking must not reshuffle equal units from one run to the next.
    twins = [unit(year_installed=1990, no_load_loss_w=900.0, peak_load_pu=0.5)] * 40
    others = [unit(year_installed=1990, no_load_loss_w=605.0 + 20.0 * k, peak_load_pu=0.5) for k in range(30)]
    result = shortlist(fleet_of(twins + others + twins), **BASIS, discount_rate=0.06, reference_year=2025,
                       service_life_years=40, sizing_years=10, **by_rating())
    order = list(result.order)
    tied = [k for k in order if result.npv[k] == result.npv[0]]
    assert tied == list(range(40)) + list(range(70, 110))
    assert np.all(np.diff(result.npv[result.order]) <= 0)


def test_payback_is_infinite_without_a_saving_and_zero_without_a_net_cost():
    # Hand definition: payback = net cost / first-year saving; inf when saving <= 0.
    # All units at 1.0 pu, so they are right-sized to their own 400 kVA. The first and third are
    # replaced by their twins (no saving), the third and second at no net cost.
    fleet = fleet_of([unit(rating_kva=400.0, peak_load_pu=1.0)] * 3)
    result = shortlist(fleet, **BASIS, discount_rate=0.06, reference_year=2025, service_life_years=40,
                       sizing_years=0, candidate_no_load_loss_w=[500.0, 100.0, 500.0],
                       candidate_load_loss_w=[5000.0, 1000.0, 5000.0],
                       replacement_cost=[8000.0, 0.0, 0.0], salvage_value=[0.0, 500.0, 500.0])
    assert_array_equal(result.right_sized_rating_kva, [400.0, 400.0, 400.0])
    assert result.annual_saving[0] == 0.0 and result.simple_payback_years[0] == math.inf
    assert result.annual_saving[1] > 0 and result.simple_payback_years[1] == 0.0
    assert result.annual_saving[2] == 0.0 and result.simple_payback_years[2] == math.inf


def test_shortlist_checks_its_inputs():
    fleet = fleet_of(HAND_FLEET)
    common = dict(**BASIS, discount_rate=0.06, service_life_years=40, sizing_years=5)
    with pytest.raises(InvalidInput) as both:
        shortlist(fleet, **common, reference_year=2025, **by_rating(), candidate_no_load_loss_w=[1.0, 1.0, 1.0])
    assert both.value.field == "candidate_no_load_loss_w"
    with pytest.raises(InvalidInput) as early:
        shortlist(fleet, **common, reference_year=1999, **by_rating())
    assert early.value.field == "reference_year"
    with pytest.raises(InvalidInput) as shape:
        tables = by_rating()
        shortlist(fleet, **common, reference_year=2025, **{**tables, "load_loss_w_by_rating": np.ones((3, 15))})
    assert shape.value.field == "load_loss_w_by_rating"
    with pytest.raises(InvalidInput) as length:  # one value too many for the 15 standard ratings
        shortlist(fleet, **common, reference_year=2025, **{**tables, "replacement_cost_by_rating": np.ones(16)})
    assert length.value.field == "replacement_cost_by_rating"


def test_an_empty_fleet_gives_empty_results():
    # Common practice, no source: a filter that leaves no unit must not fail.
    empty = FleetArrays([], [], [], [], [], [], [], [])
    losses = annual_losses(empty, **BASIS)
    assert losses["loss_cost"].shape == (0,)
    totals = group_totals(losses, np.array([], dtype=np.int64), n_groups=2)
    assert_array_equal(totals["loss_cost"], [0.0, 0.0])
    assert totals["loss_cost"].dtype == np.float64
    result = shortlist(empty, **BASIS, discount_rate=0.06, reference_year=2025, service_life_years=40,
                       sizing_years=5, **by_rating())
    assert result.npv.shape == (0,) and result.order.shape == (0,)
    assert len(fill_missing_losses(empty)) == 0
