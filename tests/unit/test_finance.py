"""Present-worth factors.

Check values from docs/references.md R3 (standard finance identity); numpy-financial
(`pv`, `npv`) and plain Python loops are the independent references.
"""

import math

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from domain import InvalidInput, present_worth_factor, present_worth_of_growing_series


@pytest.mark.parametrize(
    ("rate", "years", "expected"),
    [(0.08, 30, 11.2578), (0.05, 20, 12.4622)],  # docs/references.md R3, standard finance identity
)
def test_pwf_reference_check_values(rate, years, expected):
    result = present_worth_factor(rate, years)
    assert isinstance(result, float)
    assert_allclose(result, expected, atol=5e-5)


def test_pwf_matches_numpy_financial_pv_for_an_array_of_rates():
    # numpy-financial: pv of a payment of 1 at year end (when=0), sign flipped.
    rates = np.array([-0.05, 0.0, 1e-4, 0.03, 0.08, 0.15, 0.5])
    with np.errstate(invalid="ignore", divide="ignore"):  # npf divides by the zero rate
        expected = np.array([-npf.pv(rate, 25, 1.0) for rate in rates])
    assert_allclose(present_worth_factor(rates, 25), expected, rtol=1e-12)


def test_pwf_broadcasts_rates_against_years():
    rates = np.array([0.04, 0.08])
    years = np.array([10, 20, 30])
    result = present_worth_factor(rates[:, None], years[None, :])
    assert result.shape == (2, 3)
    expected = [[-npf.pv(r, n, 1.0) for n in years] for r in rates]
    assert_allclose(result, expected, rtol=1e-12)


def test_pwf_zero_rate_is_number_of_years_and_continuous_near_zero():
    assert present_worth_factor(0.0, 30) == 30.0
    assert_allclose(present_worth_factor(1e-12, 30), 30.0, rtol=1e-9)


def test_pwf_keeps_precision_for_tiny_rates():
    # Series expansion PWF = n - n(n+1)/2 * i + O(i**2) (standard calculus). The
    # plain formula (as in npf.pv) cancels catastrophically here: it is off by ~8e-8.
    assert_allclose(present_worth_factor(1e-9, 25), 25 - 325e-9, rtol=1e-14)


def test_pwf_nan_propagates_elementwise():
    result = present_worth_factor(np.array([0.08, np.nan]), 30)
    assert_allclose(result[0], 11.2578, atol=5e-5)
    assert np.isnan(result[1])


@pytest.mark.parametrize(
    ("rate", "years", "field"),
    [
        (-1.0, 10, "discount_rate"),
        (-2.0, 10, "discount_rate"),
        (0.05, -1, "years"),
        ("x", 10, "discount_rate"),
    ],
)
def test_pwf_rejects_out_of_domain_inputs(rate, years, field):
    with pytest.raises(InvalidInput) as caught:
        present_worth_factor(rate, years)
    assert caught.value.field == field


def _growing_series_by_loop(rate: float, years: int, growth: float) -> float:
    return sum((1 + growth) ** (t - 1) / (1 + rate) ** t for t in range(1, years + 1))


@pytest.mark.parametrize(
    ("rate", "years", "growth"),
    [(0.08, 30, 0.0), (0.08, 30, 0.03), (0.05, 20, 0.05), (0.05, 1, 0.2), (0.1, 40, -0.02), (0.0, 15, 0.02)],
)
def test_growing_series_matches_plain_loop(rate, years, growth):
    result = present_worth_of_growing_series(rate, years, growth)
    assert isinstance(result, float)
    assert_allclose(result, _growing_series_by_loop(rate, years, growth), rtol=1e-12)


def test_growing_series_matches_numpy_financial_npv():
    # npf.npv discounts values[t] by (1+i)**t from t = 0, so year-0 flow is 0.
    rate, years, growth = 0.07, 25, 0.025
    flows = [0.0] + [(1 + growth) ** (t - 1) for t in range(1, years + 1)]
    assert_allclose(present_worth_of_growing_series(rate, years, growth), npf.npv(rate, flows), rtol=1e-12)


def test_growing_series_with_equal_growth_and_rate_is_n_over_one_plus_i():
    # Each term is 1/(1+i) when g == i: standard finance identity.
    assert_allclose(present_worth_of_growing_series(0.06, 30, 0.06), 30 / 1.06, rtol=1e-12)


def test_level_series_equals_pwf_for_arrays_of_rates():
    rates = np.linspace(-0.02, 0.2, 12)
    assert_allclose(present_worth_of_growing_series(rates, 30), present_worth_factor(rates, 30), rtol=1e-12)


def test_growing_series_broadcasts_rate_against_growth():
    rates = np.array([0.05, 0.08, 0.1])
    growths = np.array([0.0, 0.02])
    result = present_worth_of_growing_series(rates[:, None], 20, growths[None, :])
    assert result.shape == (3, 2)
    for a, rate in enumerate(rates):
        for b, growth in enumerate(growths):
            assert math.isclose(result[a, b], _growing_series_by_loop(rate, 20, growth), rel_tol=1e-12)


@pytest.mark.parametrize("years", [0, -3, 2.5, True, float("nan"), "30", 10**6])
def test_growing_series_rejects_bad_years(years):
    with pytest.raises(InvalidInput) as caught:
        present_worth_of_growing_series(0.08, years)
    assert caught.value.field == "years"


def test_growing_series_accepts_integer_valued_float_years():
    assert_allclose(present_worth_of_growing_series(0.08, 30.0), present_worth_factor(0.08, 30), rtol=1e-12)


def test_growing_series_rejects_growth_at_minus_one():
    with pytest.raises(InvalidInput) as caught:
        present_worth_of_growing_series(0.08, 10, -1.0)
    assert caught.value.field == "growth"
