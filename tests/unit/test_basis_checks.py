"""Second looks at a cost basis's inputs (domain/basis_checks.py): each check's boundary.

The thresholds are common practice, no source; the expected years and peaks are worked by
hand from peak_t = peak * (1 + g)**(t - 1).
"""

import numpy as np
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from domain.basis_checks import (
    MAX_PLAUSIBLE_PRICE_PER_KWH,
    MIN_PLAUSIBLE_PRICE_PER_KWH,
    discount_rate_warnings,
    energy_price_warnings,
    escalation_warnings,
    first_year_above_rating,
    fixed_charge_rate_warnings,
    levelised_peak_warnings,
    peak_growth_warnings,
    peak_load_by_year,
    present_worth_warnings,
    price_path_warnings,
)

PRESENT_WORTH = dict(
    energy_price_per_kwh=0.08, energy_escalation=0.02, discount_rate=0.06, years=30, peak_load_pu=0.8, load_growth=0.0
)


def _codes(warnings) -> list[str]:
    return [w.code for w in warnings]


# --- the peak against the rating ----------------------------------------------------------------

def test_peak_by_year_follows_the_growth_convention():
    # Hand values: 0.8, 0.8 x 1.05, 0.8 x 1.05^2.
    assert_allclose(peak_load_by_year(0.8, 0.05, 3), [0.8, 0.84, 0.882], rtol=1e-12)


def test_a_peak_of_exactly_one_pu_is_not_a_warning():
    assert first_year_above_rating(1.0, 0.0, 30) is None
    assert peak_growth_warnings(1.0, 0.0, 30) == []
    # Grown onto the rating: 0.8 pu x 1.25 in year 2, 0.5 pu doubled in year 2.
    assert peak_growth_warnings(0.8, 0.25, 2) == [] and peak_growth_warnings(0.5, 1.0, 2) == []
    # Float noise of the growth formula is at the rating, not above it.
    assert peak_growth_warnings(1.0 + 1e-12, 0.0, 30) == []
    assert levelised_peak_warnings(1.0 + 1e-12) == []


def test_the_first_year_above_the_rating_and_the_last_years_peak():
    # 0.9 x 1.02^5 = 0.9937 (year 6) <= 1 < 0.9 x 1.02^6 = 1.0135 (year 7); year 30: 0.9 x 1.02^29 = 1.59826.
    assert first_year_above_rating(0.9, 0.02, 30) == 7
    assert first_year_above_rating(0.9, 0.02, 6) is None
    [warning] = peak_growth_warnings(0.9, 0.02, 30)
    assert warning.code == "peak_above_rating" and warning.field == "peak_load_pu"
    assert "first in year 7" in warning.message and "in year 30" in warning.message
    assert "1.598 pu" in warning.message and "2 % a year" in warning.message


def test_a_peak_above_the_rating_from_year_one():
    assert first_year_above_rating(1.01, 0.0, 10) == 1
    [warning] = peak_growth_warnings(1.2, -0.05, 10)
    # Falling growth: above in year 1, 1.2 x 0.95^9 = 0.75630 pu in year 10.
    assert "first in year 1" in warning.message and "0.756 pu" in warning.message


@given(
    peak=st.floats(0.0, 2.0),
    growth=st.floats(-0.2, 0.2),
    years=st.integers(1, 100),
)
def test_the_first_year_above_is_the_first_peak_above(peak, growth, years):
    peaks = peak_load_by_year(peak, growth, years)
    first = first_year_above_rating(peak, growth, years)
    if first is None:
        assert np.all(peaks <= 1.0 + 1e-9)
    else:
        assert peaks[first - 1] > 1.0 and np.all(peaks[: first - 1] <= 1.0 + 1e-9)


def test_a_levelised_peak_is_checked_against_the_rating():
    assert levelised_peak_warnings(1.0) == []
    [warning] = levelised_peak_warnings(1.05)
    assert warning.code == "levelised_peak_above_rating" and "1.05 pu" in warning.message


# --- rates ----------------------------------------------------------------------------------------

def test_a_negative_discount_rate_is_named_in_percent():
    assert discount_rate_warnings(0.0) == []
    [warning] = discount_rate_warnings(-0.02, label_of=lambda name: {"discount_rate": "Discount rate"}[name])
    assert warning.code == "negative_discount_rate" and warning.field == "discount_rate"
    assert warning.message.startswith("Discount rate is -2 % a year")
    assert "later years weigh more than earlier ones" in warning.message


def test_escalation_above_the_discount_rate_for_decades():
    assert escalation_warnings(0.05, 0.03, 20) != []
    assert escalation_warnings(0.05, 0.03, 19) == []  # not for decades
    assert escalation_warnings(0.03, 0.03, 30) == []  # equal: each year weighs the same
    assert escalation_warnings(0.0, -0.02, 30) == []  # no escalation; the negative rate has its own warning
    [warning] = escalation_warnings(0.05, 0.03, 25)
    assert "5 % a year" in warning.message and "3 % a year" in warning.message and "25 years" in warning.message


# --- energy prices --------------------------------------------------------------------------------

def test_the_ends_of_the_price_band_are_in_it():
    assert energy_price_warnings(MIN_PLAUSIBLE_PRICE_PER_KWH) == []
    assert energy_price_warnings(MAX_PLAUSIBLE_PRICE_PER_KWH) == []
    assert _codes(energy_price_warnings(0.0099)) == ["energy_price_out_of_band"]
    [warning] = energy_price_warnings(55.0, currency="EUR")
    assert "55 EUR/kWh" in warning.message and "0.01 to 1 EUR/kWh" in warning.message


def test_a_price_path_names_its_one_year_out_of_band():
    assert price_path_warnings([0.08, 0.09, 0.1]) == []
    [warning] = price_path_warnings([0.08, 0.09, 1.5, 0.1], currency="EUR")
    assert warning.code == "price_path_out_of_band" and warning.field == "energy_price_path_per_kwh"
    assert "the price of year 3, 1.5 EUR/kWh, is outside 0.01 to 1 EUR/kWh" in warning.message
    assert "year 1" not in warning.message and "year 4" not in warning.message


def test_a_long_price_path_names_the_first_years_and_counts_the_rest():
    [warning] = price_path_warnings([0.08, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0])
    assert "the prices of years 2 (0), 3 (0), 4 (0), 5 (0), 6 (0), 7 (0) and 4 more, per kWh, are" in warning.message


# --- each method's checks together ----------------------------------------------------------------

def test_usual_present_worth_inputs_give_no_warning():
    assert present_worth_warnings(**PRESENT_WORTH) == []


def test_a_price_path_replaces_the_year_one_price_and_the_escalation():
    path = [0.08] * 30
    changed = PRESENT_WORTH | dict(energy_price_per_kwh=50.0, energy_escalation=0.5)
    assert _codes(present_worth_warnings(**changed)) == ["energy_price_out_of_band", "escalation_above_discount_rate"]
    assert present_worth_warnings(**changed, energy_price_path_per_kwh=path) == []


def test_present_worth_warnings_name_each_input_with_the_callers_words():
    labels = {"discount_rate": "Discount rate", "peak_load_pu": "Peak load", "load_growth": "Peak load growth g",
              "energy_escalation": "Energy price escalation e"}
    found = present_worth_warnings(**PRESENT_WORTH | dict(discount_rate=-0.01, peak_load_pu=0.9, load_growth=0.02),
                                   label_of=labels.__getitem__)
    # 2 % escalation against -1 % discount for 30 years is the third.
    assert _codes(found) == ["negative_discount_rate", "peak_above_rating", "escalation_above_discount_rate"]
    assert found[1].message.startswith("Peak load 0.9 pu with peak load growth g of 2 % a year")
    assert found[2].message.startswith("Energy price escalation e 2 % a year is above the discount rate -1 % a year")


def test_fixed_charge_rate_warnings():
    assert fixed_charge_rate_warnings(energy_cost_per_kwh=0.06, peak_load_pu=1.0) == []
    found = fixed_charge_rate_warnings(energy_cost_per_kwh=60.0, peak_load_pu=1.1)
    assert _codes(found) == ["levelised_peak_above_rating", "energy_price_out_of_band"]
    assert found[1].field == "energy_cost_per_kwh"
