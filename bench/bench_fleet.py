"""Fleet loss costing at scale: annual losses and the replacement shortlist for 1,000,000 units.

Run from the repository root: ``python -m bench.bench_fleet`` (``make bench``).

It times the public API (``annual_losses`` then ``shortlist``) on a synthetic fleet
and, in the same run, a "numpy floor": the same arithmetic written as the fewest
plain numpy expressions, without input checks, dataclasses or the by-rating look-up
helpers. Each is the best of several repeats; the ratio API / floor is the overhead
of the API's checks and structure. The two results are compared before any figure is
printed, so the floor cannot drift from what the API computes.

The synthetic fleet is invented (random ratings, vintages, loadings); the prices are
round numbers, not any utility's.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable

import numpy as np

from domain.fleet import (
    DEFAULT_TYPICAL_LOSSES,
    STANDARD_RATINGS_KVA,
    FleetArrays,
    annual_losses,
    fill_missing_losses,
    group_totals,
    limit_losses_by_rating,
    shortlist,
)
from domain.limits import BUILT_IN

REFERENCE_YEAR = 2025
BASIS = dict(
    energy_price_per_kwh=0.09,
    capacity_cost_per_kw_year=80.0,
    responsibility_factor=0.8,
    carbon_price_per_t=60.0,
    emission_factor_t_per_mwh=0.35,
)
TERMS = dict(
    discount_rate=0.06,
    energy_escalation=0.02,
    load_growth=0.015,
    reference_year=REFERENCE_YEAR,
    service_life_years=40,
    sizing_years=10,
    max_loading_pu=0.9,
)
HOURS = 8760.0


def synthetic_fleet(n_units: int, seed: int = 20250101, missing_share: float = 0.1) -> FleetArrays:
    """A random but plausible fleet; ``missing_share`` of the losses are NaN, then filled."""
    rng = np.random.default_rng(seed)
    ratings = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    weights = np.linspace(3.0, 0.5, ratings.size)
    rating = rng.choice(ratings, size=n_units, p=weights / weights.sum())
    insulation = (rng.random(n_units) < 0.15).astype(np.int8)
    year = rng.integers(1960, REFERENCE_YEAR + 1, size=n_units)
    fleet = FleetArrays(
        rating_kva=rating,
        phases=np.full(n_units, 3, dtype=np.int8),
        insulation=insulation,
        year_installed=year,
        no_load_loss_w=np.full(n_units, np.nan),
        load_loss_w=np.full(n_units, np.nan),
        peak_load_pu=rng.lognormal(np.log(0.55), 0.45, size=n_units).clip(0.02, 2.0),
        loss_factor=rng.uniform(0.15, 0.45, size=n_units),
    )
    typical = fill_missing_losses(fleet, DEFAULT_TYPICAL_LOSSES)
    # Test-certificate values scatter around the typical ones; some records lack them.
    p0 = typical.no_load_loss_w * rng.normal(1.0, 0.08, n_units)
    pk = typical.load_loss_w * rng.normal(1.0, 0.06, n_units)
    p0[rng.random(n_units) < missing_share] = np.nan
    pk[rng.random(n_units) < missing_share] = np.nan
    return fill_missing_losses(
        FleetArrays(fleet.rating_kva, fleet.phases, fleet.insulation, fleet.year_installed,
                    p0, pk, fleet.peak_load_pu, fleet.loss_factor),
        DEFAULT_TYPICAL_LOSSES,
    )


def candidate_tables() -> dict[str, np.ndarray]:
    """New units just meeting EU Tier 2, by insulation and standard rating; prices invented."""
    by_insulation = []
    for insulation in ("liquid", "dry"):
        table = next(t for t in BUILT_IN
                     if t.key == "eu-tier-2" and t.kind == "max_losses" and t.insulation == insulation)
        by_insulation.append(limit_losses_by_rating(table, STANDARD_RATINGS_KVA))
    ratings = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    price = 4000.0 + 18.0 * ratings
    return {
        "no_load_loss_w_by_rating": np.vstack([p0 for p0, _ in by_insulation]),
        "load_loss_w_by_rating": np.vstack([pk for _, pk in by_insulation]),
        "replacement_cost_by_rating": np.vstack([price, 1.3 * price]),
    }


def run_api(fleet: FleetArrays, tables: dict[str, np.ndarray]) -> tuple[dict[str, np.ndarray], object]:
    losses = annual_losses(fleet, **BASIS)
    result = shortlist(fleet, **BASIS, **TERMS, **tables, installation_cost=2500.0, salvage_value=500.0)
    return losses, result


def run_floor(cols: dict[str, np.ndarray], tables: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The same quantities in plain numpy: no checks, no structure."""
    price, sc, rf = BASIS["energy_price_per_kwh"], BASIS["capacity_cost_per_kw_year"], BASIS["responsibility_factor"]
    ef = BASIS["emission_factor_t_per_mwh"]
    carbon = BASIS["carbon_price_per_t"] * ef / 1000.0
    i, e, g = TERMS["discount_rate"], TERMS["energy_escalation"], TERMS["load_growth"]
    rating, pu, lsf = cols["rating_kva"], cols["peak_load_pu"], cols["loss_factor"]
    p = cols["no_load_loss_w"] * 1e-3
    l_old = cols["load_loss_w"] * 1e-3 * pu**2
    e_nl = p * HOURS
    e_ll = l_old * lsf * HOURS
    energy = e_nl + e_ll
    cost = (price + carbon) * energy + sc * (p + rf * l_old)
    co2 = energy * (ef * 1e-3)

    std = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    peak_kva = pu * rating
    idx = np.searchsorted(std, peak_kva * ((1 + g) ** TERMS["sizing_years"] / TERMS["max_loading_pu"]))
    ok = idx < std.size
    idx = np.minimum(idx, std.size - 1)
    new_rating = np.where(ok, std[idx], np.nan)
    ins = cols["insulation"]
    new_p = tables["no_load_loss_w_by_rating"][ins, idx] * 1e-3
    new_pu = peak_kva / new_rating
    new_l = tables["load_loss_w_by_rating"][ins, idx] * 1e-3 * new_pu**2
    new_cost = (price + carbon) * HOURS * (new_p + lsf * new_l) + sc * (new_p + rf * new_l)
    saving = cost - new_cost
    net = tables["replacement_cost_by_rating"][ins, idx] + 2500.0 - 500.0
    n = np.maximum(TERMS["service_life_years"] - (REFERENCE_YEAR - cols["year_installed"]), 0).astype(float)

    def pw(growth: float) -> np.ndarray:
        d = (growth - i) / (1 + i)
        return np.expm1(n * np.log1p(d)) / (d * (1 + i))

    g2 = (1 + g) ** 2
    d_p, d_l = p - new_p, l_old - new_l
    pw_load = pw(g2 - 1)
    npv = (d_p * (price * HOURS * pw(e) + (carbon * HOURS + sc) * pw(0.0))
           + d_l * (lsf * HOURS * (price * pw((1 + e) * g2 - 1) + carbon * pw_load) + sc * rf * pw_load) - net)
    with np.errstate(divide="ignore", invalid="ignore"):
        payback = np.maximum(net, 0) / saving
    payback[saving <= 0] = np.inf
    return {"no_load_energy_kwh": e_nl, "load_energy_kwh": e_ll, "loss_cost": cost, "co2_t": co2,
            "right_sized_rating_kva": new_rating, "annual_saving": saving, "npv": npv,
            "simple_payback_years": payback, "order": np.argsort(-npv, kind="stable")}


def seconds(work: Callable[[], object]) -> float:
    start = time.perf_counter()
    work()
    return time.perf_counter() - start


def best_of(repeats: int, work: Callable[[], object]) -> float:
    return min(seconds(work) for _ in range(repeats))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()

    fleet = synthetic_fleet(args.units)
    tables = candidate_tables()
    cols = {name: getattr(fleet, name) for name in
            ("rating_kva", "insulation", "year_installed", "no_load_loss_w", "load_loss_w",
             "peak_load_pu", "loss_factor")}

    losses, result = run_api(fleet, tables)
    floor = run_floor(cols, tables)
    for name in ("no_load_energy_kwh", "load_energy_kwh", "loss_cost", "co2_t"):
        np.testing.assert_allclose(losses[name], floor[name], rtol=1e-12)
    for name in ("right_sized_rating_kva", "annual_saving", "npv", "simple_payback_years"):
        np.testing.assert_allclose(getattr(result, name), floor[name], rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(result.npv[result.order], floor["npv"][floor["order"]], rtol=1e-9, atol=1e-6)

    # Alternate the two so that both see the same machine state; keep the best of each.
    api_times, floor_times = [], []
    for _ in range(args.repeats):
        api_times.append(seconds(lambda: run_api(fleet, tables)))
        floor_times.append(seconds(lambda: run_floor(cols, tables)))
    api, base = min(api_times), min(floor_times)
    print(f"fleet annual losses + shortlist, {args.units:,} units: {api:.2f} s; "
          f"numpy floor {base:.2f} s; ratio {api / base:.2f}")

    fleet_with_gaps = _with_gaps(fleet)
    fill = best_of(args.repeats, lambda: fill_missing_losses(fleet_with_gaps, DEFAULT_TYPICAL_LOSSES))
    keys = (fleet.year_installed // 10 - 196).astype(np.int64)
    group = best_of(args.repeats, lambda: group_totals(losses, keys))
    shortlisted = int(np.count_nonzero(result.npv > 0))
    print(f"  also: fill_missing_losses (10 % missing) {fill:.2f} s; group_totals by decade {group:.3f} s; "
          f"{shortlisted:,} units with NPV > 0")


def _with_gaps(fleet: FleetArrays) -> FleetArrays:
    rng = np.random.default_rng(7)
    p0 = fleet.no_load_loss_w.copy()
    p0[rng.random(len(fleet)) < 0.1] = np.nan
    return FleetArrays(fleet.rating_kva, fleet.phases, fleet.insulation, fleet.year_installed, p0,
                       fleet.load_loss_w, fleet.peak_load_pu, fleet.loss_factor)


if __name__ == "__main__":
    main()
