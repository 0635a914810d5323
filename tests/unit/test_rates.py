"""Capitalisation rates: direct, present worth (docs/references.md R3) and fixed charge rate."""

import math

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from domain import (
    CapitalisationRates,
    InvalidInput,
    fixed_charge_rate_terms,
    present_worth_factor,
    present_worth_of_growing_series,
    present_worth_table,
    rates_direct,
    rates_fixed_charge_rate,
    rates_present_worth,
)

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


def _rates_by_plain_loop(p: dict) -> tuple[float, float, float]:
    """Independent year-by-year evaluation of docs/references.md R3 in plain Python."""
    hours = p.get("hours_per_year", 8760.0)
    a = b = c = 0.0
    for t in range(1, p["years"] + 1):
        discount = (1.0 + p["discount_rate"]) ** t
        price = p["energy_price_per_kwh"] * (1.0 + p["energy_escalation"]) ** (t - 1)
        peak = p["peak_load_pu"] * (1.0 + p["load_growth"]) ** (t - 1)
        sc, rf = p["capacity_cost_per_kw_year"], p["responsibility_factor"]
        a += (sc * 1.0 + price * hours) / discount
        b += (sc * rf * peak**2 + price * hours * p["loss_factor"] * peak**2) / discount
        c += (sc * rf + price * p["cooling_hours_per_year"]) / discount
    return a, b, c


@pytest.mark.parametrize(
    "changes",
    [
        {},
        {"energy_escalation": 0.0, "load_growth": 0.0},
        {"discount_rate": 0.0},
        {"years": 1},
        {"hours_per_year": 8784.0},
    ],
)
def test_present_worth_rates_match_plain_loop(changes):
    params = {**BASE, **changes}
    rates = rates_present_worth(**params)
    assert_allclose(
        [rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw],
        _rates_by_plain_loop(params),
        rtol=1e-9,
    )


def test_present_worth_no_load_rate_matches_numpy_financial_npv():
    # npf.npv discounts values[t] by (1+i)**t from t = 0; year 0 carries nothing.
    p = BASE
    flows = [0.0] + [
        p["capacity_cost_per_kw_year"]
        + p["energy_price_per_kwh"] * (1 + p["energy_escalation"]) ** (t - 1) * 8760
        for t in range(1, p["years"] + 1)
    ]
    assert_allclose(
        rates_present_worth(**p).no_load_rate_per_kw, npf.npv(p["discount_rate"], flows), rtol=1e-9
    )


def test_level_present_worth_equals_annual_cost_times_pwf():
    # With e = g = 0: A = (SC + price * 8760) * PWF(i, n) (docs/references.md R3).
    params = {**BASE, "energy_escalation": 0.0, "load_growth": 0.0}
    rates = rates_present_worth(**params)
    pwf = present_worth_factor(params["discount_rate"], params["years"])
    annual_a = params["capacity_cost_per_kw_year"] + params["energy_price_per_kwh"] * 8760
    assert_allclose(rates.no_load_rate_per_kw, annual_a * pwf, rtol=1e-12)
    annual_b = (
        params["capacity_cost_per_kw_year"] * params["responsibility_factor"]
        + params["energy_price_per_kwh"] * 8760 * params["loss_factor"]
    ) * params["peak_load_pu"] ** 2
    assert_allclose(rates.load_rate_per_kw, annual_b * pwf, rtol=1e-12)


def test_load_rate_with_growth_equals_two_growing_series():
    # peak_t**2 grows by (1+g)**2 a year and the energy part also by (1+e): closed
    # check through present_worth_of_growing_series (standard finance identity).
    p = BASE
    i, n, e, g = p["discount_rate"], p["years"], p["energy_escalation"], p["load_growth"]
    capacity = p["capacity_cost_per_kw_year"] * p["responsibility_factor"] * p["peak_load_pu"] ** 2
    energy = p["energy_price_per_kwh"] * 8760 * p["loss_factor"] * p["peak_load_pu"] ** 2
    expected = capacity * present_worth_of_growing_series(i, n, (1 + g) ** 2 - 1) + energy * (
        present_worth_of_growing_series(i, n, (1 + e) * (1 + g) ** 2 - 1)
    )
    assert_allclose(rates_present_worth(**p).load_rate_per_kw, expected, rtol=1e-12)


def test_table_columns_sum_to_rates():
    table = present_worth_table(**BASE)
    rates = rates_present_worth(**BASE)
    components = {f"{loss}_{part}" for loss in ("no_load", "load", "aux") for part in ("capacity", "energy", "carbon")}
    assert set(table) == {
        "year",
        "discount_factor",
        "energy_price_per_kwh",
        "carbon_cost_per_kwh",
        "peak_load_pu",
        "no_load_term",
        "load_term",
        "aux_term",
    } | components
    assert all(len(column) == BASE["years"] for column in table.values())
    assert table["year"].tolist() == list(range(1, 31))
    assert_allclose(table["discount_factor"][0], 1 / 1.075)
    assert_allclose(table["energy_price_per_kwh"][1], 0.09 * 1.025)
    assert_allclose(table["peak_load_pu"][0], 0.7)
    assert_allclose(table["no_load_term"].sum(), rates.no_load_rate_per_kw, rtol=1e-15)
    assert_allclose(table["load_term"].sum(), rates.load_rate_per_kw, rtol=1e-15)
    assert_allclose(table["aux_term"].sum(), rates.aux_rate_per_kw, rtol=1e-15)


def test_fixed_charge_rate_hand_computed():
    # Hand computed: SC 100, EC 0.05, FCR 0.12, RF 0.9, PL 0.8, LsF 0.3, 2000 h cooling.
    # A = (100 + 438) / 0.12 = 4483.333...; B = (90 + 131.4) * 0.64 / 0.12 = 1180.8;
    # C = (90 + 100) / 0.12 = 1583.333...
    rates = rates_fixed_charge_rate(
        system_capacity_cost_per_kw_year=100.0,
        energy_cost_per_kwh=0.05,
        fixed_charge_rate=0.12,
        responsibility_factor=0.9,
        peak_load_pu=0.8,
        loss_factor=0.3,
        cooling_hours_per_year=2000.0,
    )
    assert_allclose(rates.no_load_rate_per_kw, 538 / 0.12, rtol=1e-12)
    assert_allclose(rates.load_rate_per_kw, 1180.8, rtol=1e-12)
    assert_allclose(rates.aux_rate_per_kw, 190 / 0.12, rtol=1e-12)


def test_fixed_charge_rate_terms_sum_to_the_rates_with_carbon_as_energy():
    # Hand computed on the inputs above with carbon 0.02 /kWh: the carbon terms are the energy
    # terms at 0.02 instead of 0.05, and each rate is the sum of its three terms, so moving
    # carbon into the energy cost gives the same rates (common practice, no source).
    base = dict(system_capacity_cost_per_kw_year=100.0, fixed_charge_rate=0.12, responsibility_factor=0.9,
                peak_load_pu=0.8, loss_factor=0.3, cooling_hours_per_year=2000.0)
    terms = fixed_charge_rate_terms(**base, energy_cost_per_kwh=0.05, carbon_cost_per_kwh=0.02)
    assert_allclose(terms[("A", "capacity")], 100 / 0.12, rtol=1e-15)
    assert_allclose(terms[("A", "carbon")], 0.02 * 8760 / 0.12, rtol=1e-15)
    assert_allclose(terms[("B", "energy")], 0.05 * 8760 * 0.3 * 0.64 / 0.12, rtol=1e-15)
    assert_allclose(terms[("C", "carbon")], 0.02 * 2000 / 0.12, rtol=1e-15)
    split = rates_fixed_charge_rate(**base, energy_cost_per_kwh=0.05, carbon_cost_per_kwh=0.02)
    folded = rates_fixed_charge_rate(**base, energy_cost_per_kwh=0.07)
    for rate, field in (("A", "no_load_rate_per_kw"), ("B", "load_rate_per_kw"), ("C", "aux_rate_per_kw")):
        total = sum(value for (r, _), value in terms.items() if r == rate)
        assert_allclose(getattr(split, field), total, rtol=1e-15)
        assert_allclose(getattr(split, field), getattr(folded, field), rtol=1e-14)


def test_fixed_charge_rate_default_has_no_cooling_energy():
    rates = rates_fixed_charge_rate(
        system_capacity_cost_per_kw_year=100.0,
        energy_cost_per_kwh=0.05,
        fixed_charge_rate=0.1,
        responsibility_factor=0.5,
        peak_load_pu=1.0,
        loss_factor=0.3,
    )
    assert_allclose(rates.aux_rate_per_kw, 500.0)  # SC * RF / FCR, hand computed


def test_direct_rates_are_stored_as_given():
    # US rural-utility example rates quoted in docs/references.md R3.
    rates = rates_direct(2450, 1304, 756)
    assert rates == CapitalisationRates(2450.0, 1304.0, 756.0)
    assert isinstance(rates.no_load_rate_per_kw, float)
    assert rates_direct(1.0, 2.0).aux_rate_per_kw == 0.0


@pytest.mark.parametrize(
    ("args", "field"),
    [
        ((-1.0, 1.0), "no_load_rate_per_kw"),
        ((1.0, math.nan), "load_rate_per_kw"),
        ((1.0, 1.0, math.inf), "aux_rate_per_kw"),
    ],
)
def test_direct_rates_validated(args, field):
    with pytest.raises(InvalidInput) as caught:
        rates_direct(*args)
    assert caught.value.field == field


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("energy_price_per_kwh", -0.01),
        ("energy_price_per_kwh", math.nan),
        ("capacity_cost_per_kw_year", -1.0),
        ("capacity_cost_per_kw_year", math.inf),
        ("discount_rate", -1.0),
        ("discount_rate", 5.0),
        ("energy_escalation", -1.0),
        ("load_growth", -1.5),
        ("years", 0),
        ("years", 30.5),
        ("years", 101),
        ("peak_load_pu", -0.1),
        ("peak_load_pu", 11.0),
        ("loss_factor", 1.1),
        ("loss_factor", -0.1),
        ("responsibility_factor", 1.5),
        ("cooling_hours_per_year", -1.0),
        ("cooling_hours_per_year", 9000.0),
        ("hours_per_year", 0.0),
        ("hours_per_year", 10000.0),
    ],
)
def test_present_worth_validation_names_the_field(field, value):
    for function in (rates_present_worth, present_worth_table):
        with pytest.raises(InvalidInput) as caught:
            function(**{**BASE, field: value})
        assert caught.value.field == field


FCR_BASE = dict(
    system_capacity_cost_per_kw_year=100.0,
    energy_cost_per_kwh=0.05,
    fixed_charge_rate=0.12,
    responsibility_factor=0.9,
    peak_load_pu=0.8,
    loss_factor=0.3,
    cooling_hours_per_year=2000.0,
)


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("system_capacity_cost_per_kw_year", -5.0),
        ("energy_cost_per_kwh", math.nan),
        ("fixed_charge_rate", 0.0),
        ("fixed_charge_rate", -0.1),
        ("fixed_charge_rate", 2.0),
        ("responsibility_factor", -0.2),
        ("peak_load_pu", 20.0),
        ("loss_factor", 1.01),
        ("cooling_hours_per_year", 9000.0),
        ("hours_per_year", -1.0),
    ],
)
def test_fixed_charge_rate_validation_names_the_field(field, value):
    with pytest.raises(InvalidInput) as caught:
        rates_fixed_charge_rate(**{**FCR_BASE, field: value})
    assert caught.value.field == field


def test_negative_discount_rate_above_minus_one_is_accepted():
    rates = rates_present_worth(**{**BASE, "discount_rate": -0.01})
    assert np.isfinite(rates.no_load_rate_per_kw)


def test_components_add_up_to_each_term():
    table = present_worth_table(**BASE, carbon_cost_per_kwh=0.02)
    for loss in ("no_load", "load", "aux"):
        parts = table[f"{loss}_capacity"] + table[f"{loss}_energy"] + table[f"{loss}_carbon"]
        assert_allclose(parts, table[f"{loss}_term"], rtol=1e-15)


def test_carbon_cost_acts_as_an_energy_price_adder():
    # Hand check (unit arithmetic): 80 EUR/t x 0.25 t/MWh = 20 EUR/MWh = 0.02 EUR/kWh. Adding it as
    # carbon must give the same A, B, C as a flat price path raised by the same 0.02 each year.
    from domain.rates import carbon_cost_per_kwh

    adder = carbon_cost_per_kwh(80.0, 0.25)
    assert_allclose(adder, 0.02)
    flat = {**BASE, "energy_escalation": 0.0}
    with_carbon = rates_present_worth(**flat, carbon_cost_per_kwh=adder)
    raised = rates_present_worth(**{**flat, "energy_price_per_kwh": flat["energy_price_per_kwh"] + adder})
    assert_allclose(with_carbon.no_load_rate_per_kw, raised.no_load_rate_per_kw, rtol=1e-12)
    assert_allclose(with_carbon.load_rate_per_kw, raised.load_rate_per_kw, rtol=1e-12)
    assert_allclose(with_carbon.aux_rate_per_kw, raised.aux_rate_per_kw, rtol=1e-12)


def test_explicit_price_path_against_a_plain_loop():
    # Independent plain-Python present-worth loop (docs/references.md R3 conventions).
    path = [0.08, 0.09, 0.11, 0.10, 0.12]
    args = {**BASE, "years": 5}
    rates = rates_present_worth(**args, energy_price_path_per_kwh=path)
    i, g, sc = args["discount_rate"], args["load_growth"], args["capacity_cost_per_kw_year"]
    a = b = 0.0
    for t in range(1, 6):
        peak = args["peak_load_pu"] * (1 + g) ** (t - 1)
        a += (sc + path[t - 1] * 8760) / (1 + i) ** t
        b += (sc * args["responsibility_factor"] + path[t - 1] * 8760 * args["loss_factor"]) * peak**2 / (1 + i) ** t
    assert_allclose(rates.no_load_rate_per_kw, a, rtol=1e-12)
    assert_allclose(rates.load_rate_per_kw, b, rtol=1e-12)


def test_price_path_must_cover_every_year():
    with pytest.raises(InvalidInput) as caught:
        present_worth_table(**{**BASE, "years": 3}, energy_price_path_per_kwh=[0.1, 0.1])
    assert caught.value.field == "energy_price_path_per_kwh"
