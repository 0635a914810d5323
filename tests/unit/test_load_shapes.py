"""Load shapes: expansion of typical days, figures, gap filling, apparent power."""

from __future__ import annotations

import calendar
from datetime import date

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose

from domain.errors import InvalidInput
from domain.load_shapes import (
    DayCurves,
    apparent_power,
    expand_daily_curves,
    fill_short_gaps,
    load_duration_curve,
    shape_figures,
)


def _season(months, weekday=1.0, weekend=0.5):
    return DayCurves(tuple(months), tuple([weekday] * 24), tuple([weekend] * 24))


def test_leap_year_has_8784_hours_and_weekends_fall_on_weekends():
    # Calendar facts (common knowledge): 2028 is a leap year; 1 January 2028 is a Saturday.
    year = expand_daily_curves(2028, [_season(range(1, 13))])
    assert year.shape == (8784,)
    assert date(2028, 1, 1).weekday() == 5
    assert_allclose(year[:48], 0.5)  # Saturday and Sunday
    assert_allclose(year[48:72], 1.0)  # Monday


def test_expansion_matches_a_calendar_loop():
    seasons = [
        DayCurves((12, 1, 2), tuple(np.linspace(0.2, 1.0, 24)), tuple(np.linspace(0.1, 0.5, 24))),
        DayCurves(tuple(range(3, 12)), tuple(np.linspace(0.3, 0.9, 24)), tuple([0.2] * 24)),
    ]
    expected = []
    for month in range(1, 13):
        season = seasons[0] if month in (12, 1, 2) else seasons[1]
        for day in range(1, calendar.monthrange(2026, month)[1] + 1):
            expected.extend(season.weekend if date(2026, month, day).weekday() >= 5 else season.weekday)
    assert_allclose(expand_daily_curves(2026, seasons), expected)


@pytest.mark.parametrize(
    ("seasons", "field"),
    [
        ([_season(range(1, 12))], "seasons"),
        ([_season(range(1, 13)), _season([5])], "seasons[1].months"),
        ([DayCurves(tuple(range(1, 13)), (1.0,) * 23, (1.0,) * 24)], "seasons[0].weekday"),
        ([_season(range(1, 13), weekend=-1.0)], "seasons[0].weekend"),
    ],
)
def test_bad_seasons_name_the_field(seasons, field):
    with pytest.raises(InvalidInput) as caught:
        expand_daily_curves(2026, seasons)
    assert caught.value.field == field


def test_figures_against_definitions():
    # Definitions from docs/references.md R4, computed independently here.
    values = np.array([2.0, 4.0, 1.0, 3.0])
    figures = shape_figures(values)
    assert figures.peak == 4.0
    assert_allclose(figures.load_factor, 2.5 / 4)
    assert_allclose(figures.loss_factor, (4 + 16 + 1 + 9) / 4 / 16)
    assert_allclose(figures.rms_pu, np.sqrt(7.5) / 4)
    assert_allclose(figures.equivalent_hours, 4 * 30 / 4 / 16)


@given(arrays(np.float64, st.integers(24, 400), elements=st.floats(0, 1e4)).filter(lambda a: a.max() > 1e-300))
def test_figures_bounds(values):
    # LF^2 <= LsF <= LF (docs/references.md R4).
    figures = shape_figures(values)
    assert figures.load_factor**2 <= figures.loss_factor * (1 + 1e-12)
    assert figures.loss_factor <= figures.load_factor * (1 + 1e-12)


def test_fill_short_gaps_draws_straight_lines_and_leaves_long_or_end_gaps():
    series = np.array([1.0, np.nan, np.nan, 4.0, np.nan, np.nan, np.nan, np.nan, 9.0, np.nan])
    filled, count = fill_short_gaps(series, 2)
    assert count == 2
    assert_allclose(filled[:4], [1, 2, 3, 4])
    assert np.isnan(filled[4:8]).all() and np.isnan(filled[9])
    filled, count = fill_short_gaps(series, 4)
    assert count == 6
    assert_allclose(filled[3:9], [4, 5, 6, 7, 8, 9])


def test_apparent_power_and_duration_curve():
    assert_allclose(apparent_power([90.0, 80.0], [0.9, 0.8]), [100.0, 100.0])
    with pytest.raises(InvalidInput):
        apparent_power([1.0], [0.0])
    assert_allclose(load_duration_curve([1.0, 3.0, 2.0]), [3.0, 2.0, 1.0])
