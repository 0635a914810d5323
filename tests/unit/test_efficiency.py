"""Efficiency, loading of maximum efficiency and Peak Efficiency Index (docs/references.md R5)."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from domain import InvalidInput, efficiency, loading_of_maximum_efficiency, peak_efficiency_index


def test_efficiency_hand_computed():
    # 1000 kVA, P0 1000 W, Pk 10000 W, k 0.5, pf 1: 500 kW out, 3.5 kW lost (hand computed).
    result = efficiency(0.5, 1000.0, 1000.0, 10_000.0)
    assert isinstance(result, float)
    assert_allclose(result, 500_000 / 503_500, rtol=1e-12)


def test_efficiency_with_power_factor_and_aux_hand_computed():
    # k 1, pf 0.8, 1000 kVA: 800 kW out; losses 1000 + 500 + 10000 W (hand computed).
    assert_allclose(
        efficiency(1.0, 1000.0, 1000.0, 10_000.0, power_factor=0.8, aux_loss_w=500.0),
        800_000 / 811_500,
        rtol=1e-12,
    )


def test_efficiency_is_zero_at_no_load_even_without_losses():
    assert efficiency(0.0, 1000.0, 1000.0, 10_000.0) == 0.0
    assert efficiency(0.0, 1000.0, 0.0, 0.0) == 0.0


def test_efficiency_broadcasts_loadings_against_offers():
    loads = np.array([0.25, 0.5, 0.75, 1.0])
    p0 = np.array([500.0, 800.0, 1200.0])
    pk = np.array([9000.0, 7000.0, 6000.0])
    table = efficiency(loads[:, None], 1000.0, p0, pk)
    assert table.shape == (4, 3)
    for a, k in enumerate(loads):
        for b in range(3):
            assert_allclose(table[a, b], efficiency(float(k), 1000.0, float(p0[b]), float(pk[b])), rtol=1e-15)


def test_efficiency_nan_propagates():
    # Documented: NaN in any input gives NaN in that element only.
    result = efficiency(np.array([0.5, np.nan, 0.0]), 1000.0, 1000.0, 10_000.0)
    assert not np.isnan(result[0]) and np.isnan(result[1]) and result[2] == 0.0
    assert np.isnan(efficiency(0.0, 1000.0, np.nan, 10_000.0))


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        (dict(load_pu=-0.1), "load_pu"),
        (dict(rating_kva=0.0), "rating_kva"),
        (dict(no_load_loss_w=-1.0), "no_load_loss_w"),
        (dict(load_loss_w=np.inf), "load_loss_w"),
        (dict(power_factor=1.2), "power_factor"),
        (dict(aux_loss_w=-5.0), "aux_loss_w"),
    ],
)
def test_efficiency_rejects_out_of_domain_inputs(kwargs, field):
    args = dict(load_pu=0.5, rating_kva=1000.0, no_load_loss_w=1000.0, load_loss_w=10_000.0) | kwargs
    with pytest.raises(InvalidInput) as caught:
        efficiency(**args)
    assert caught.value.field == field


def test_loading_of_maximum_efficiency_hand_computed_and_arrays():
    assert_allclose(loading_of_maximum_efficiency(1000.0, 10_000.0), np.sqrt(0.1), rtol=1e-15)
    result = loading_of_maximum_efficiency(np.array([250.0, np.nan]), 1000.0)
    assert_allclose(result[0], 0.5)
    assert np.isnan(result[1])
    with pytest.raises(InvalidInput) as caught:
        loading_of_maximum_efficiency(1000.0, 0.0)
    assert caught.value.field == "load_loss_w"


@given(
    p0=st.floats(10.0, 1e5),
    pk=st.floats(100.0, 1e6),
    rating=st.floats(10.0, 1e5),
    pf=st.floats(0.5, 1.0),
)
def test_efficiency_peaks_at_k_star(p0, pk, rating, pf):
    # d(eta)/dk = 0 at k* = sqrt(P0/Pk): both neighbours are lower (textbook result).
    k_star = loading_of_maximum_efficiency(p0, pk)
    step = 1e-3 * k_star
    around = efficiency(np.array([k_star - step, k_star, k_star + step]), rating, p0, pk, pf)
    assert around[1] >= around[0] and around[1] >= around[2]
    assert around[1] > min(around[0], around[2])


def test_efficiency_grid_maximum_is_at_k_star():
    grid = np.linspace(0.01, 1.5, 150_001)
    curve = efficiency(grid, 1000.0, 1000.0, 10_000.0)
    assert_allclose(grid[np.argmax(curve)], np.sqrt(0.1), atol=2e-5)


def test_pei_hand_computed():
    # 1 - 2 * sqrt(1000 * 10000) / 1e6 (hand computed).
    result = peak_efficiency_index(1000.0, 1000.0, 10_000.0)
    assert isinstance(result, float)
    assert_allclose(result, 1 - 2 * np.sqrt(1e7) / 1e6, rtol=1e-15)


def test_pei_is_the_peak_of_one_minus_losses_over_transmitted_power():
    # IEC 60076-20 definition (from memory): maximum over k of 1 - losses(k) / (k * S).
    grid = np.linspace(0.01, 1.5, 150_001)
    s_w, p0, pk = 1000.0 * 1000.0, 1000.0, 10_000.0
    ratio = 1 - (p0 + grid**2 * pk) / (grid * s_w)
    assert_allclose(ratio.max(), peak_efficiency_index(1000.0, p0, pk), rtol=1e-12)


@given(
    p0=st.floats(10.0, 1e5),
    pk=st.floats(100.0, 1e6),
    rating=st.floats(100.0, 1e6),
)
def test_pei_and_efficiency_at_k_star(p0, pk, rating):
    # Unity pf, no cooling: efficiency(k*) = 1 / (2 - PEI) exactly, so PEI sits just
    # below efficiency(k*), by at most (1 - PEI)**2 (derived in efficiency.py Notes).
    pk = max(pk, p0 * 1.01)  # keep k* <= 1 and losses plausible
    pei = peak_efficiency_index(rating, p0, pk)
    eta_star = efficiency(loading_of_maximum_efficiency(p0, pk), rating, p0, pk)
    assert_allclose(eta_star, 1 / (2 - pei), rtol=1e-12)
    assert pei <= eta_star + 1e-15
    assert eta_star - pei <= (1 - pei) ** 2 + 1e-15


def test_pei_numerically_close_to_efficiency_at_k_star_for_a_distribution_unit():
    # A 1000 kVA unit with EU Tier 2 maxima from docs/references.md R6 (from memory):
    # P0 693 W, Pk 7600 W. The two agree to about 2e-5 (0.002 percentage points).
    pei = peak_efficiency_index(1000.0, 693.0, 7600.0)
    eta_star = efficiency(loading_of_maximum_efficiency(693.0, 7600.0), 1000.0, 693.0, 7600.0)
    assert_allclose(pei, eta_star, atol=3e-5)


def test_pei_cooling_power_adds_to_no_load_loss_and_nan_propagates():
    assert_allclose(
        peak_efficiency_index(1000.0, 800.0, 9000.0, cooling_power_no_load_w=200.0),
        peak_efficiency_index(1000.0, 1000.0, 9000.0),
        rtol=1e-15,
    )
    result = peak_efficiency_index(np.array([1000.0, np.nan]), 1000.0, 10_000.0)
    assert np.isnan(result[1]) and result[0] < 1.0
    assert peak_efficiency_index(1000.0, 0.0, 10_000.0) == 1.0
    with pytest.raises(InvalidInput) as caught:
        peak_efficiency_index(1000.0, 1000.0, 10_000.0, cooling_power_no_load_w=-1.0)
    assert caught.value.field == "cooling_power_no_load_w"
