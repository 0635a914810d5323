"""Capitalisation rates A, B, C: the present value of one kW of guaranteed loss.

A prices the no-load loss, B the load loss at rated current, C the auxiliary
(cooling) loss, each in currency per kW. Three ways to obtain them: entered
directly, computed year by year by present worth, or by the fixed-charge-rate
method. All rates of interest, escalation and growth are fractions per year.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields

import numpy as np

from domain._checks import finite_scalar, float_array, whole_number
from domain.errors import InvalidInput

__all__ = [
    "CapitalisationRates",
    "rates_direct",
    "rates_present_worth",
    "present_worth_table",
    "rates_fixed_charge_rate",
    "fixed_charge_rate_terms",
    "carbon_cost_per_kwh",
]

# Plausibility bounds: beyond these an input is a typing error, not a tender.
MAX_YEARS = 100
MAX_PEAK_LOAD_PU = 10.0
MAX_RATE_PER_YEAR = 1.0  # 100 % a year for discount, escalation, growth and FCR
MAX_HOURS_PER_YEAR = 8784.0  # a leap year


@dataclass(frozen=True)
class CapitalisationRates:
    """Capitalisation rates A, B, C [currency per kW, present values].

    Values are checked on construction: finite and non-negative, stored as
    Python floats. The field names are the keyword names of ``rates_direct``.
    """

    no_load_rate_per_kw: float
    load_rate_per_kw: float
    aux_rate_per_kw: float

    def __post_init__(self) -> None:
        for item in fields(self):
            value = finite_scalar(item.name, getattr(self, item.name), low=0.0)
            object.__setattr__(self, item.name, value)


def rates_direct(
    no_load_rate_per_kw: float, load_rate_per_kw: float, aux_rate_per_kw: float = 0.0
) -> CapitalisationRates:
    """Capitalisation rates entered by the user, as published by the buyer.

    Parameters
    ----------
    no_load_rate_per_kw : float
        A [currency/kW], finite, >= 0.
    load_rate_per_kw : float
        B [currency/kW], finite, >= 0.
    aux_rate_per_kw : float, optional
        C [currency/kW], finite, >= 0. Default 0.

    Returns
    -------
    CapitalisationRates

    Notes
    -----
    No computation: A, B and C are taken as given.

    References
    ----------
    Common practice: many utilities publish A and B once a year in their
    tender documents.
    """
    return CapitalisationRates(
        no_load_rate_per_kw=no_load_rate_per_kw,
        load_rate_per_kw=load_rate_per_kw,
        aux_rate_per_kw=aux_rate_per_kw,
    )


def present_worth_table(
    *,
    energy_price_per_kwh: float,
    energy_escalation: float,
    capacity_cost_per_kw_year: float,
    discount_rate: float,
    years: int,
    peak_load_pu: float,
    load_growth: float,
    loss_factor: float,
    responsibility_factor: float,
    cooling_hours_per_year: float,
    hours_per_year: float = 8760.0,
    energy_price_path_per_kwh: Sequence[float] | None = None,
    carbon_cost_per_kwh: float = 0.0,
) -> dict[str, np.ndarray]:
    """Year-by-year present worth of one kW of each loss; its columns sum to A, B, C.

    Parameters
    ----------
    energy_price_per_kwh : float
        Energy price in year 1 [currency/kWh], >= 0.
    energy_escalation : float
        Yearly escalation e of the energy price [fraction per year], -1 < e <= 1.
    capacity_cost_per_kw_year : float
        System capacity (demand) cost SC [currency/kW-year], >= 0, not escalated.
    discount_rate : float
        Discount rate i [fraction per year], -1 < i <= 1.
    years : int
        Evaluation period n [years], whole number 1..100.
    peak_load_pu : float
        Peak loading in year 1 [pu of rating], 0..10.
    load_growth : float
        Yearly growth g of the peak loading [fraction per year], -1 < g <= 1.
    loss_factor : float
        Loss factor LsF [fraction, 0..1].
    responsibility_factor : float
        Peak responsibility factor RF [fraction, 0..1]: the share of the
        transformer's peak load loss present at the time of the system peak.
    cooling_hours_per_year : float
        Hours a year the auxiliary (cooling) equipment runs [h], 0..hours_per_year.
    hours_per_year : float, optional
        Hours energised per year [h], 0 < h <= 8784. Default 8760.
    energy_price_path_per_kwh : sequence of float, optional
        An explicit energy price for each year 1..n [currency/kWh], >= 0; when
        given it replaces ``energy_price_per_kwh`` and ``energy_escalation``.
    carbon_cost_per_kwh : float, optional
        Cost of the emissions of one kWh [currency/kWh] (carbon price per tonne
        times the grid emission factor), added to every year's energy price and
        shown as its own component. Default 0.

    Returns
    -------
    dict[str, numpy.ndarray]
        One row per year t = 1..n under the keys "year", "discount_factor"
        [1/(1+i)**t], "energy_price_per_kwh" [currency/kWh],
        "carbon_cost_per_kwh" [currency/kWh], "peak_load_pu" [pu], the
        present-worth terms "no_load_term", "load_term", "aux_term"
        [currency/kW], and each term split into its "_capacity", "_energy" and
        "_carbon" components (for example "load_energy"), which add up to it.

    Notes
    -----
    Conventions: cash flows at the end of year t, discounted by (1 + i)**t;
    price_t = price * (1 + e)**(t - 1) (or the explicit path);
    peak_t = peak_pu * (1 + g)**(t - 1). The carbon cost is added to price_t.

    no_load_term_t = (SC * 1 + price_t * hours) / (1 + i)**t
    (the no-load loss is present at the system peak and every hour energised);

    load_term_t = (SC * RF + price_t * hours * LsF) * peak_t**2 / (1 + i)**t;

    aux_term_t = (SC * RF + price_t * cooling_hours) / (1 + i)**t.

    References
    ----------
    Present-worth loss-evaluation method as described for IEEE C57.120 and the
    US rural-utility bulletins (REA 65-2, RUS 1724E-301); the conventions
    above are this product's own, stated so that results can be reproduced.
    """
    sc = finite_scalar("capacity_cost_per_kw_year", capacity_cost_per_kw_year, low=0.0)
    price = finite_scalar("energy_price_per_kwh", energy_price_per_kwh, low=0.0)
    e = finite_scalar("energy_escalation", energy_escalation, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    i = finite_scalar("discount_rate", discount_rate, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    n = whole_number("years", years, low=1, high=MAX_YEARS)
    peak = finite_scalar("peak_load_pu", peak_load_pu, low=0.0, high=MAX_PEAK_LOAD_PU)
    g = finite_scalar("load_growth", load_growth, low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    lsf = finite_scalar("loss_factor", loss_factor, low=0.0, high=1.0)
    rf = finite_scalar("responsibility_factor", responsibility_factor, low=0.0, high=1.0)
    hours = finite_scalar("hours_per_year", hours_per_year, low=0.0, low_open=True, high=MAX_HOURS_PER_YEAR)
    cooling_hours = finite_scalar("cooling_hours_per_year", cooling_hours_per_year, low=0.0, high=hours)

    carbon = finite_scalar("carbon_cost_per_kwh", carbon_cost_per_kwh, low=0.0)

    year = np.arange(1, n + 1)
    discount_factor = np.power(1.0 + i, -year.astype(float))
    if energy_price_path_per_kwh is None:
        price_t = price * np.power(1.0 + e, year - 1.0)
    else:
        price_t = float_array("energy_price_path_per_kwh", energy_price_path_per_kwh)
        if price_t.shape != (n,):
            raise InvalidInput("energy_price_path_per_kwh", f"needs one price for each of the {n} years")
        if not np.all(np.isfinite(price_t)) or np.any(price_t < 0):
            raise InvalidInput("energy_price_path_per_kwh", "prices must be finite and >= 0")
    peak_t = peak * np.power(1.0 + g, year - 1.0)
    load_weight = peak_t**2 * discount_factor
    columns = {
        "no_load_capacity": sc * discount_factor,
        "no_load_energy": price_t * hours * discount_factor,
        "no_load_carbon": carbon * hours * discount_factor,
        "load_capacity": sc * rf * load_weight,
        "load_energy": price_t * hours * lsf * load_weight,
        "load_carbon": carbon * hours * lsf * load_weight,
        "aux_capacity": sc * rf * discount_factor,
        "aux_energy": price_t * cooling_hours * discount_factor,
        "aux_carbon": carbon * cooling_hours * discount_factor,
    }
    terms = {
        f"{loss}_term": columns[f"{loss}_capacity"] + columns[f"{loss}_energy"] + columns[f"{loss}_carbon"]
        for loss in ("no_load", "load", "aux")
    }
    return {
        "year": year,
        "discount_factor": discount_factor,
        "energy_price_per_kwh": price_t,
        "carbon_cost_per_kwh": np.full(n, carbon),
        "peak_load_pu": peak_t,
        **terms,
        **columns,
    }


def rates_present_worth(
    *,
    energy_price_per_kwh: float,
    energy_escalation: float,
    capacity_cost_per_kw_year: float,
    discount_rate: float,
    years: int,
    peak_load_pu: float,
    load_growth: float,
    loss_factor: float,
    responsibility_factor: float,
    cooling_hours_per_year: float,
    hours_per_year: float = 8760.0,
    energy_price_path_per_kwh: Sequence[float] | None = None,
    carbon_cost_per_kwh: float = 0.0,
) -> CapitalisationRates:
    """Capitalisation rates by the present-worth method: the sums of the yearly table.

    Parameters
    ----------
    Same keywords, units and limits as ``present_worth_table``.

    Returns
    -------
    CapitalisationRates
        A, B, C [currency/kW].

    Notes
    -----
    A = sum_t (SC + price_t * hours) / (1 + i)**t,
    B = sum_t (SC * RF + price_t * hours * LsF) * peak_t**2 / (1 + i)**t,
    C = sum_t (SC * RF + price_t * cooling_hours) / (1 + i)**t,
    with t = 1..n, price_t = price * (1 + e)**(t - 1) and
    peak_t = peak_pu * (1 + g)**(t - 1). With e = g = 0,
    A = (SC + price * hours) * PWF(i, n).

    References
    ----------
    Present-worth loss-evaluation method as described for IEEE C57.120 and the
    US rural-utility bulletins (REA 65-2, RUS 1724E-301).
    """
    table = present_worth_table(
        energy_price_per_kwh=energy_price_per_kwh,
        energy_escalation=energy_escalation,
        capacity_cost_per_kw_year=capacity_cost_per_kw_year,
        discount_rate=discount_rate,
        years=years,
        peak_load_pu=peak_load_pu,
        load_growth=load_growth,
        loss_factor=loss_factor,
        responsibility_factor=responsibility_factor,
        cooling_hours_per_year=cooling_hours_per_year,
        hours_per_year=hours_per_year,
        energy_price_path_per_kwh=energy_price_path_per_kwh,
        carbon_cost_per_kwh=carbon_cost_per_kwh,
    )
    return CapitalisationRates(
        no_load_rate_per_kw=float(table["no_load_term"].sum()),
        load_rate_per_kw=float(table["load_term"].sum()),
        aux_rate_per_kw=float(table["aux_term"].sum()),
    )


def carbon_cost_per_kwh(carbon_price_per_t: float, emission_factor_t_per_mwh: float) -> float:
    """Cost of the emissions of one kWh taken from the grid.

    Parameters
    ----------
    carbon_price_per_t : float
        Carbon price [currency per tonne CO2], >= 0.
    emission_factor_t_per_mwh : float
        Grid emission factor [t CO2 per MWh], >= 0.

    Returns
    -------
    float
        [currency/kWh].

    Notes
    -----
    cost = price * factor / 1000 (a MWh is 1000 kWh).

    References
    ----------
    Unit arithmetic, common practice.
    """
    price = finite_scalar("carbon_price_per_t", carbon_price_per_t, low=0.0)
    factor = finite_scalar("emission_factor_t_per_mwh", emission_factor_t_per_mwh, low=0.0, high=5.0)
    return price * factor / 1000.0


# The three loss kinds of the fixed-charge-rate method and the three parts of each rate.
FCR_RATES = (("A", "no_load"), ("B", "load"), ("C", "aux"))
FCR_COMPONENTS = ("capacity", "energy", "carbon")


def fixed_charge_rate_terms(
    *,
    system_capacity_cost_per_kw_year: float,
    energy_cost_per_kwh: float,
    fixed_charge_rate: float,
    responsibility_factor: float,
    peak_load_pu: float,
    loss_factor: float,
    cooling_hours_per_year: float = 0.0,
    hours_per_year: float = 8760.0,
    carbon_cost_per_kwh: float = 0.0,
) -> dict[tuple[str, str], float]:
    """Each term of A, B and C by the fixed-charge-rate (levelised annual cost) method.

    Parameters
    ----------
    system_capacity_cost_per_kw_year : float
        Levelised system capacity cost SC [currency/kW-year], >= 0.
    energy_cost_per_kwh : float
        Levelised energy cost EC [currency/kWh], >= 0.
    fixed_charge_rate : float
        Fixed charge rate FCR [per unit per year], 0 < FCR <= 1.
    responsibility_factor : float
        Peak responsibility factor RF [fraction, 0..1].
    peak_load_pu : float
        Equivalent levelised peak load PL [pu of rating], 0..10.
    loss_factor : float
        Loss factor LsF [fraction, 0..1].
    cooling_hours_per_year : float, optional
        Hours a year the cooling equipment runs [h], 0..hours_per_year. Default 0.
    hours_per_year : float, optional
        Hours energised per year [h], 0 < h <= 8784. Default 8760.
    carbon_cost_per_kwh : float, optional
        Cost of the emissions of one kWh [currency/kWh], >= 0 (``carbon_cost_per_kwh``). Default 0.

    Returns
    -------
    dict
        ``{(rate, component): value}`` for rate in A, B, C and component in capacity, energy,
        carbon [currency/kW]; a rate is the sum of its three terms.

    Notes
    -----
    With CC the carbon cost per kWh and h the hours energised:

    A = SC / FCR + EC h / FCR + CC h / FCR,
    B = (SC RF + EC h LsF + CC h LsF) PL**2 / FCR,
    C = (SC RF + EC cooling_hours + CC cooling_hours) / FCR.

    References
    ----------
    A and B: IEEE C57.120, also NEMA TP-1 and the US rural-utility bulletins
    (from memory; verify against the standard before quoting it).
    C: common practice, no source: the same structure as the present-worth C.
    """
    sc = finite_scalar("system_capacity_cost_per_kw_year", system_capacity_cost_per_kw_year, low=0.0)
    ec = finite_scalar("energy_cost_per_kwh", energy_cost_per_kwh, low=0.0)
    fcr = finite_scalar(
        "fixed_charge_rate", fixed_charge_rate, low=0.0, low_open=True, high=MAX_RATE_PER_YEAR
    )
    rf = finite_scalar("responsibility_factor", responsibility_factor, low=0.0, high=1.0)
    pl = finite_scalar("peak_load_pu", peak_load_pu, low=0.0, high=MAX_PEAK_LOAD_PU)
    lsf = finite_scalar("loss_factor", loss_factor, low=0.0, high=1.0)
    hours = finite_scalar("hours_per_year", hours_per_year, low=0.0, low_open=True, high=MAX_HOURS_PER_YEAR)
    cooling_hours = finite_scalar("cooling_hours_per_year", cooling_hours_per_year, low=0.0, high=hours)
    carbon = finite_scalar("carbon_cost_per_kwh", carbon_cost_per_kwh, low=0.0)
    # Per rate: the kW of capacity it holds and the hours of energy it burns, per kW of loss.
    capacity_kw = {"A": 1.0, "B": rf * pl**2, "C": rf}
    energy_h = {"A": hours, "B": hours * lsf * pl**2, "C": cooling_hours}
    terms: dict[tuple[str, str], float] = {}
    for rate, _ in FCR_RATES:
        terms[(rate, "capacity")] = sc * capacity_kw[rate] / fcr
        terms[(rate, "energy")] = ec * energy_h[rate] / fcr
        terms[(rate, "carbon")] = carbon * energy_h[rate] / fcr
    return terms


def rates_fixed_charge_rate(
    *,
    system_capacity_cost_per_kw_year: float,
    energy_cost_per_kwh: float,
    fixed_charge_rate: float,
    responsibility_factor: float,
    peak_load_pu: float,
    loss_factor: float,
    cooling_hours_per_year: float = 0.0,
    hours_per_year: float = 8760.0,
    carbon_cost_per_kwh: float = 0.0,
) -> CapitalisationRates:
    """Capitalisation rates by the fixed-charge-rate (levelised annual cost) method.

    Parameters
    ----------
    As ``fixed_charge_rate_terms``.

    Returns
    -------
    CapitalisationRates
        A, B, C [currency/kW]: each the sum of its terms from ``fixed_charge_rate_terms``.

    Notes
    -----
    A = (SC + EC * hours) / FCR,
    B = (SC * RF + EC * hours * LsF) * PL**2 / FCR,
    C = (SC * RF + EC * cooling_hours) / FCR (carbon adds to EC).

    References
    ----------
    As ``fixed_charge_rate_terms``.
    """
    terms = fixed_charge_rate_terms(
        system_capacity_cost_per_kw_year=system_capacity_cost_per_kw_year, energy_cost_per_kwh=energy_cost_per_kwh,
        fixed_charge_rate=fixed_charge_rate, responsibility_factor=responsibility_factor,
        peak_load_pu=peak_load_pu, loss_factor=loss_factor, cooling_hours_per_year=cooling_hours_per_year,
        hours_per_year=hours_per_year, carbon_cost_per_kwh=carbon_cost_per_kwh,
    )
    no_load, load, aux = (sum(terms[(rate, part)] for part in FCR_COMPONENTS) for rate, _ in FCR_RATES)
    return CapitalisationRates(no_load_rate_per_kw=no_load, load_rate_per_kw=load, aux_rate_per_kw=aux)
