"""Second looks at a cost basis's inputs: things that are allowed but unusual, never refusals.

Each check returns ``BasisWarning`` items: a code that programs can match, the input it
concerns (named as in ``domain.rates``: rates of interest, escalation and growth are
fractions per year here), and a message in the user's units (percent a year for rates,
pu of the rating for loadings, currency per kWh for prices). Callers that show the
inputs under other words pass ``label_of`` so that the messages name the boxes the user
sees.

The thresholds are common practice, no source: they only prompt a second look.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "BasisWarning",
    "MAX_PLAUSIBLE_PRICE_PER_KWH",
    "MIN_PLAUSIBLE_PRICE_PER_KWH",
    "discount_rate_warnings",
    "energy_price_warnings",
    "escalation_warnings",
    "first_year_above_rating",
    "fixed_charge_rate_warnings",
    "levelised_peak_warnings",
    "peak_growth_warnings",
    "peak_load_by_year",
    "present_worth_warnings",
    "price_path_warnings",
]

RATED_PU = 1.0
# peak * (1 + g)**(t - 1) carries float noise; a peak that lands on the rating (0.5 pu
# doubled, say) is not above it.
_PU_TOLERANCE = 1e-9
# A wide band for an energy price, sized for currencies near the euro or the dollar
# (common practice, no source). Below it the price is near zero or typed in the wrong unit;
# above it, a price per MWh is the usual slip. Currencies with small units (yen, rupee)
# sit above the band and will see the warning.
MIN_PLAUSIBLE_PRICE_PER_KWH = 0.01
MAX_PLAUSIBLE_PRICE_PER_KWH = 1.0
# An escalation above the discount rate matters once it compounds for this long [years].
LONG_PERIOD_YEARS = 20
# A price path's out-of-band years named one by one, before "and N more".
_YEARS_NAMED = 6


@dataclass(frozen=True)
class BasisWarning:
    """One thing worth a second look in a cost basis's inputs."""

    code: str
    field: str
    message: str


LabelOf = Callable[[str], str]


def _words(field: str) -> str:
    return field.replace("_", " ").capitalize()


def _pct(fraction: float) -> str:
    """A fraction per year as the user typed it, in percent a year."""
    return f"{fraction * 100:g} % a year"


def _per_kwh(currency: str) -> str:
    return f"{currency}/kWh" if currency else "per kWh"


def peak_load_by_year(peak_load_pu: float, load_growth: float, years: int) -> np.ndarray:
    """Peak loading in each year of the evaluation period.

    Parameters
    ----------
    peak_load_pu : float
        Peak loading in year 1 [pu of rating].
    load_growth : float
        Yearly growth g of the peak [fraction per year].
    years : int
        Evaluation period n [years].

    Returns
    -------
    numpy.ndarray
        peak_t [pu] for t = 1..n.

    Notes
    -----
    peak_t = peak * (1 + g)**(t - 1), the convention of ``domain.rates.present_worth_table``.

    References
    ----------
    Common practice, no source.
    """
    t = np.arange(1, int(years) + 1, dtype=float)
    return float(peak_load_pu) * np.power(1.0 + float(load_growth), t - 1.0)


def first_year_above_rating(peak_load_pu: float, load_growth: float, years: int) -> int | None:
    """The first year whose peak loading is above the rating, or None.

    Parameters
    ----------
    peak_load_pu : float
        Peak loading in year 1 [pu of rating].
    load_growth : float
        Yearly growth g of the peak [fraction per year].
    years : int
        Evaluation period n [years].

    Returns
    -------
    int or None
        The smallest t in 1..n with peak_t > 1.0 pu; a peak of exactly 1.0 pu is at the
        rating, not above it.

    Notes
    -----
    peak_t = peak * (1 + g)**(t - 1).

    References
    ----------
    Common practice, no source.
    """
    above = np.flatnonzero(peak_load_by_year(peak_load_pu, load_growth, years) > RATED_PU + _PU_TOLERANCE)
    return int(above[0]) + 1 if above.size else None


def discount_rate_warnings(discount_rate: float, *, label_of: LabelOf = _words) -> list[BasisWarning]:
    """A negative discount rate: allowed, but it weighs later years more than earlier ones.

    Parameters
    ----------
    discount_rate : float
        Discount rate i [fraction per year].
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    Year t is discounted by 1 / (1 + i)**t, which grows with t when i < 0.

    References
    ----------
    Common practice, no source.
    """
    if discount_rate >= 0:
        return []
    return [BasisWarning(
        "negative_discount_rate", "discount_rate",
        f"{label_of('discount_rate')} is {_pct(discount_rate)}, below zero: allowed, but unusual. Each year's cost "
        "is then worth more today the later it falls, so later years weigh more than earlier ones.",
    )]


def peak_growth_warnings(
    peak_load_pu: float, load_growth: float, years: int, *, label_of: LabelOf = _words
) -> list[BasisWarning]:
    """A peak loading that growth drives above the rating within the evaluation period.

    Parameters
    ----------
    peak_load_pu : float
        Peak loading in year 1 [pu of rating].
    load_growth : float
        Yearly growth g of the peak [fraction per year].
    years : int
        Evaluation period n [years].
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    peak_t = peak * (1 + g)**(t - 1); warns when some peak_t > 1.0 pu, naming the first
    such year and peak_n. A lot's own peak and growth are checked the same way.

    References
    ----------
    Common practice, no source.
    """
    first = first_year_above_rating(peak_load_pu, load_growth, years)
    if first is None:
        return []
    last = float(peak_load_by_year(peak_load_pu, load_growth, years)[-1])
    growth = f" with {label_of('load_growth').lower()} of {_pct(load_growth)}" if load_growth else ""
    return [BasisWarning(
        "peak_above_rating", "peak_load_pu",
        f"{label_of('peak_load_pu')} {peak_load_pu:g} pu{growth} is above 1.0 pu (the rating) first in year "
        f"{first}; in year {int(years)}, the last of the evaluation period, it is {last:.3f} pu.",
    )]


def levelised_peak_warnings(peak_load_pu: float, *, label_of: LabelOf = _words) -> list[BasisWarning]:
    """A levelised peak loading above the rating (the fixed-charge-rate method's peak).

    Parameters
    ----------
    peak_load_pu : float
        Equivalent levelised peak load PL [pu of rating].
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    Warns when PL > 1.0 pu.

    References
    ----------
    Common practice, no source.
    """
    if peak_load_pu <= RATED_PU + _PU_TOLERANCE:
        return []
    return [BasisWarning(
        "levelised_peak_above_rating", "peak_load_pu",
        f"{label_of('peak_load_pu')} {peak_load_pu:g} pu is above 1.0 pu (the rating): the fixed-charge-rate "
        "method takes it as the peak over the whole life, so the transformer would be overloaded on average.",
    )]


def _out_of_band(price_per_kwh: float) -> bool:
    return not MIN_PLAUSIBLE_PRICE_PER_KWH <= price_per_kwh <= MAX_PLAUSIBLE_PRICE_PER_KWH


def _band(currency: str) -> str:
    return f"{MIN_PLAUSIBLE_PRICE_PER_KWH:g} to {MAX_PLAUSIBLE_PRICE_PER_KWH:g} {_per_kwh(currency)}"


def energy_price_warnings(
    price_per_kwh: float, *, field: str = "energy_price_per_kwh", currency: str = "", label_of: LabelOf = _words
) -> list[BasisWarning]:
    """An energy price outside a wide plausible band.

    Parameters
    ----------
    price_per_kwh : float
        Energy price or cost [currency/kWh].
    field : str, optional
        The input it came from (``energy_price_per_kwh`` or ``energy_cost_per_kwh``).
    currency : str, optional
        The basis's currency, for the message.
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    Warns unless MIN_PLAUSIBLE_PRICE_PER_KWH <= price <= MAX_PLAUSIBLE_PRICE_PER_KWH
    (0.01 to 1.0 per kWh); the ends are in the band.

    References
    ----------
    Common practice, no source.
    """
    if not _out_of_band(price_per_kwh):
        return []
    return [BasisWarning(
        "energy_price_out_of_band", field,
        f"{label_of(field)} {price_per_kwh:g} {_per_kwh(currency)} is outside {_band(currency)}, the usual range; "
        "check the unit (per kWh, not per MWh) and the currency.",
    )]


def price_path_warnings(
    price_path_per_kwh: Sequence[float], *, currency: str = "", label_of: LabelOf = _words
) -> list[BasisWarning]:
    """The years of an explicit energy price path whose price is outside the plausible band.

    Parameters
    ----------
    price_path_per_kwh : sequence of float
        Energy price of each year 1..n [currency/kWh].
    currency : str, optional
        The basis's currency, for the message.
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    One warning naming each year t (1-based) whose price is outside the band of
    ``energy_price_warnings``.

    References
    ----------
    Common practice, no source.
    """
    prices = np.asarray(price_path_per_kwh, dtype=float)
    years = [t + 1 for t, price in enumerate(prices) if _out_of_band(float(price))]
    if not years:
        return []
    unit = _per_kwh(currency)
    if len(years) == 1:
        which = f"the price of year {years[0]}, {prices[years[0] - 1]:g} {unit}, is"
    else:
        named = ", ".join(f"{t} ({prices[t - 1]:g})" for t in years[:_YEARS_NAMED])
        more = f" and {len(years) - _YEARS_NAMED} more" if len(years) > _YEARS_NAMED else ""
        which = f"the prices of years {named}{more}, {'in ' + unit if currency else unit}, are"
    return [BasisWarning(
        "price_path_out_of_band", "energy_price_path_per_kwh",
        f"{label_of('energy_price_path_per_kwh')}: {which} outside {_band(currency)}, the usual range; check the "
        "unit (per kWh, not per MWh) and the currency.",
    )]


def escalation_warnings(
    energy_escalation: float, discount_rate: float, years: int, *, label_of: LabelOf = _words
) -> list[BasisWarning]:
    """An energy price that escalates faster than the discount rate for decades.

    Parameters
    ----------
    energy_escalation : float
        Yearly escalation e of the energy price [fraction per year].
    discount_rate : float
        Discount rate i [fraction per year].
    years : int
        Evaluation period n [years].
    label_of : callable, optional
        The words for an input's name, for the message.

    Notes
    -----
    The energy term of year t goes as (1 + e)**(t - 1) / (1 + i)**t, which grows with t
    when e > i: the last years then carry most of the energy part of A and B. Warns when
    e > 0, e > i and n >= 20 years.

    References
    ----------
    Common practice, no source.
    """
    if not (energy_escalation > 0 and energy_escalation > discount_rate and years >= LONG_PERIOD_YEARS):
        return []
    return [BasisWarning(
        "escalation_above_discount_rate", "energy_escalation",
        f"{label_of('energy_escalation')} {_pct(energy_escalation)} is above the {label_of('discount_rate').lower()} "
        f"{_pct(discount_rate)} for {int(years)} years: each year's energy is worth more today than the year "
        "before, so the last years carry most of the energy part of the rates.",
    )]


def present_worth_warnings(
    *,
    energy_price_per_kwh: float,
    energy_escalation: float,
    discount_rate: float,
    years: int,
    peak_load_pu: float,
    load_growth: float,
    energy_price_path_per_kwh: Sequence[float] | None = None,
    currency: str = "",
    label_of: LabelOf = _words,
) -> list[BasisWarning]:
    """Every second look for the inputs of the present-worth method.

    Parameters
    ----------
    Same names and units as ``domain.rates.present_worth_table`` (rates as fractions per
    year); ``currency`` and ``label_of`` only shape the messages.

    Notes
    -----
    The discount rate, the peak and its growth, the energy price (each year of the price
    path instead, when there is one: it replaces the price and its escalation) and the
    escalation against the discount rate.

    References
    ----------
    Common practice, no source.
    """
    found = discount_rate_warnings(discount_rate, label_of=label_of)
    found += peak_growth_warnings(peak_load_pu, load_growth, years, label_of=label_of)
    if energy_price_path_per_kwh:
        found += price_path_warnings(energy_price_path_per_kwh, currency=currency, label_of=label_of)
    else:
        found += energy_price_warnings(energy_price_per_kwh, currency=currency, label_of=label_of)
        found += escalation_warnings(energy_escalation, discount_rate, years, label_of=label_of)
    return found


def fixed_charge_rate_warnings(
    *, energy_cost_per_kwh: float, peak_load_pu: float, currency: str = "", label_of: LabelOf = _words
) -> list[BasisWarning]:
    """Every second look for the inputs of the fixed-charge-rate method.

    Parameters
    ----------
    energy_cost_per_kwh : float
        Levelised energy cost EC [currency/kWh].
    peak_load_pu : float
        Equivalent levelised peak load PL [pu of rating].
    currency, label_of : optional
        Only shape the messages.

    Notes
    -----
    The levelised peak against the rating and the energy cost against the price band.

    References
    ----------
    Common practice, no source.
    """
    found = levelised_peak_warnings(peak_load_pu, label_of=label_of)
    found += energy_price_warnings(energy_cost_per_kwh, field="energy_cost_per_kwh", currency=currency,
                                   label_of=label_of)
    return found
