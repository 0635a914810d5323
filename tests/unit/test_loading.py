"""Load factor, loss factor and RMS loading (docs/references.md R4)."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose

from domain import InvalidInput, load_factor, loss_factor, loss_factor_from_load_factor, rms_loading


def test_loss_factor_from_load_factor_published_worked_example():
    # Published worked example quoted in docs/references.md R4: LF 0.65, k 0.3 -> 0.49075.
    result = loss_factor_from_load_factor(0.65, k=0.3)
    assert isinstance(result, float)
    assert_allclose(result, 0.49075, rtol=1e-12)


def test_loss_factor_from_load_factor_limits_and_arrays():
    lf = np.array([0.0, 0.2, 0.65, 1.0])
    # k = 1 gives LF, k = 0 gives LF**2 (the two bounds of the relation).
    assert_allclose(loss_factor_from_load_factor(lf, k=1.0), lf)
    assert_allclose(loss_factor_from_load_factor(lf, k=0.0), lf**2)
    assert loss_factor_from_load_factor(lf).shape == (4,)


def test_loss_factor_from_load_factor_nan_propagates_and_range_is_checked():
    result = loss_factor_from_load_factor(np.array([0.5, np.nan]))
    assert np.isnan(result[1]) and not np.isnan(result[0])
    with pytest.raises(InvalidInput) as caught:
        loss_factor_from_load_factor(1.2)
    assert caught.value.field == "load_factor"
    with pytest.raises(InvalidInput) as caught:
        loss_factor_from_load_factor(0.5, k=-0.1)
    assert caught.value.field == "k"


def test_load_factor_hand_computed():
    # mean(1, 2, 3, 4) = 2.5, peak 4 -> 0.625 (hand computed).
    result = load_factor([1.0, 2.0, 3.0, 4.0])
    assert isinstance(result, float)
    assert_allclose(result, 0.625)


def test_loss_factor_against_independent_computation():
    rng = np.random.default_rng(20240601)
    hourly = rng.uniform(0.1, 1.0, size=8760)
    squares = [p * p for p in hourly.tolist()]
    expected = (sum(squares) / len(squares)) / max(hourly.tolist()) ** 2
    assert_allclose(loss_factor(hourly), expected, rtol=1e-12)


def test_factors_work_along_last_axis_of_2d():
    series = np.array([[1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 2.0]])
    assert_allclose(load_factor(series), [0.625, 1.0])
    assert_allclose(loss_factor(series), [(1 + 4 + 9 + 16) / 4 / 16, 1.0])
    assert_allclose(rms_loading(series), [np.sqrt(7.5), 2.0])


def test_factors_survive_tiny_and_huge_samples():
    # Scaling check: the factors are dimensionless, so any unit scale gives the same.
    base = np.array([1.0, 2.0, 3.0, 4.0])
    for scale in (1e-300, 1e-310, 1e300):
        assert_allclose(loss_factor(base * scale), 30 / 4 / 16, rtol=1e-12)
        assert_allclose(rms_loading(base * scale), np.sqrt(7.5) * scale, rtol=1e-9)


def test_rms_loading_hand_computed_and_all_zero_allowed():
    # sqrt((9 + 16) / 2) = sqrt(12.5) (hand computed).
    assert_allclose(rms_loading([3.0, 4.0]), np.sqrt(12.5))
    assert rms_loading([0.0, 0.0]) == 0.0


@pytest.mark.parametrize(
    "series",
    [[], [1.0, -0.1], [1.0, np.nan], [1.0, np.inf], [0.0, 0.0], np.ones((2, 2, 2)), "abc", [[]]],
)
def test_factors_reject_bad_series(series):
    for function in (load_factor, loss_factor):
        with pytest.raises(InvalidInput) as caught:
            function(series)
        assert caught.value.field == "series"


series_strategy = arrays(
    np.float64,
    st.integers(1, 200),
    elements=st.floats(0.0, 1e4, allow_nan=False, allow_infinity=False),
).filter(lambda a: a.max() > 0)


@given(series_strategy)
def test_loss_factor_lies_between_lf_squared_and_lf(series):
    # Property stated in docs/references.md R4: LF**2 <= LsF <= LF.
    lf = load_factor(series)
    lsf = loss_factor(series)
    slack = 1e-12
    assert lf**2 <= lsf + slack
    assert lsf <= lf + slack


@given(series_strategy)
def test_rms_is_never_below_the_average(series):
    # Why costing with the average load understates load losses (docs/references.md R4).
    assert rms_loading(series) >= series.mean() * (1 - 1e-12)
