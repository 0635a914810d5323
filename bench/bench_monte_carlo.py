"""Monte Carlo of a tender's ranking: 1,000 offers under 10,000 draws of the rate inputs.

Run from the repository root: ``python -m bench.bench_monte_carlo`` (``make bench``).

Targets (from the issue), measured side by side in one run:

- ``monte_carlo`` within 1.5 times a "floor": one numpy matrix product of the
  same (draws x 3) rate matrix and (3 x offers) loss matrix, plus the prices,
  then argmin per draw. ``monte_carlo`` is timed whole: sampling the inputs,
  the present-worth rates of every draw, TOC, winners, win probabilities,
  exact percentiles, mean TOC and expected regret;
- at least 100 times faster than a plain Python loop doing the same work.
  The loop is timed on all the draws (about 5 s a run) and, as the issue
  suggests, on a subset scaled linearly. Both are printed: the subset
  flatters the loop, because 1,000 lists of 200 floats stay in cache while
  10 million boxed floats do not, and sorting grows faster than linearly;
- memory bounded for 100,000 draws (peak measured with tracemalloc, which
  sees numpy's allocations), against 800 MB for the full float64 TOC matrix.

Timings are the best of several interleaved repeats so that both sides see the
same machine state. BLAS threads are left as the environment sets them: the
floor's one large product runs on all of them, while ``monte_carlo`` keeps each
product small (one BLAS thread) and runs its chunks on threads of its own, one
per usable CPU (at most ``MAX_WORKERS``); the line of CPUs says how many.
After a threaded product OpenBLAS keeps its worker thread spinning, waiting for
more work (about 0.1 s here, OPENBLAS_THREAD_TIMEOUT), so whatever is timed right
after the floor would share a core with it. Each timed call therefore starts after
SETTLE_S of rest, the floor's as well as ``monte_carlo``'s: neither is timed while
the other's threads are still running.
The offers are invented (random but plausible prices and losses for a unit of
about 1 MVA); the inputs are those of the unit tests.
"""

from __future__ import annotations

import argparse
import math
import os
import random
import time
import tracemalloc
from collections.abc import Callable

import numpy as np

from domain.sensitivity import MAX_WORKERS, OfferArrays, monte_carlo, present_worth_rates_vectorised

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
DISTRIBUTIONS = {
    "energy_price_per_kwh": {"dist": "triangular", "low": 0.06, "mode": 0.09, "high": 0.14},
    "energy_escalation": {"dist": "uniform", "low": 0.0, "high": 0.04},
    "discount_rate": {"dist": "normal", "mean": 0.075, "sd": 0.015, "low": 0.04, "high": 0.11},
    "years": {"dist": "uniform", "low": 25, "high": 35},
    "loss_factor": {"dist": "uniform", "low": 0.2, "high": 0.35},
    "peak_load_pu": {"dist": "triangular", "low": 0.5, "mode": 0.7, "high": 1.0},
}
SEED = 2024
SETTLE_S = 0.25  # rest before each timed call: longer than OpenBLAS's spin after a product


def synthetic_offers(n_offers: int, seed: int = 7) -> dict[str, np.ndarray]:
    """Invented offers: lower losses cost more, with scatter, so several offers can win."""
    rng = np.random.default_rng(seed)
    quality = rng.uniform(0.0, 1.0, n_offers)
    p0 = 1400.0 - 700.0 * quality + rng.normal(0.0, 60.0, n_offers)
    pk = 13000.0 - 5000.0 * quality + rng.normal(0.0, 500.0, n_offers)
    paux = rng.uniform(0.0, 300.0, n_offers)
    price = 95_000.0 + 40_000.0 * quality + rng.normal(0.0, 2_500.0, n_offers)
    return {"offer_ids": np.arange(1, n_offers + 1), "prices": price, "p0_w": p0, "pk_w": pk, "paux_w": paux}


def run_monte_carlo(columns: dict[str, np.ndarray], draws: int):
    return monte_carlo(OfferArrays(**columns), BASE, DISTRIBUTIONS, draws, SEED)


def rates_of_the_draws(columns: dict[str, np.ndarray], draws: int) -> np.ndarray:
    """The (draws x 3) A, B, C that monte_carlo uses, caught through its rates_fn hook."""
    parts = []

    def recording(inputs):
        rates = present_worth_rates_vectorised(inputs)
        parts.append(np.column_stack(rates))
        return rates

    monte_carlo(OfferArrays(**columns), BASE, DISTRIBUTIONS, draws, SEED, rates_fn=recording)
    return np.concatenate(parts[1:])  # parts[0] holds the base inputs


def floor(rates: np.ndarray, losses_kw: np.ndarray, price: np.ndarray) -> np.ndarray:
    toc = rates @ losses_kw + price
    return toc.argmin(axis=1)


def plain_python(columns: dict[str, np.ndarray], draws: int, seed: int = 1) -> tuple[list, list, list]:
    """The same work in plain Python: draw, rate, cost, rank, count, regret, percentiles."""
    rng = random.Random(seed)
    prices = columns["prices"].tolist()
    p0 = columns["p0_w"].tolist()
    pk = columns["pk_w"].tolist()
    paux = columns["paux_w"].tolist()
    n = len(prices)
    d = DISTRIBUTIONS
    wins = [0] * n
    regret = [0.0] * n
    samples = [[] for _ in range(n)]
    for _ in range(draws):
        price_kwh = rng.triangular(d["energy_price_per_kwh"]["low"], d["energy_price_per_kwh"]["high"],
                                   d["energy_price_per_kwh"]["mode"])
        escalation = rng.uniform(d["energy_escalation"]["low"], d["energy_escalation"]["high"])
        while True:
            i = rng.gauss(d["discount_rate"]["mean"], d["discount_rate"]["sd"])
            if d["discount_rate"]["low"] <= i <= d["discount_rate"]["high"]:
                break
        years = rng.randint(d["years"]["low"], d["years"]["high"])
        loss_factor = rng.uniform(d["loss_factor"]["low"], d["loss_factor"]["high"])
        peak = rng.triangular(d["peak_load_pu"]["low"], d["peak_load_pu"]["high"], d["peak_load_pu"]["mode"])
        sc, rf, g, cooling = (BASE["capacity_cost_per_kw_year"], BASE["responsibility_factor"],
                              BASE["load_growth"], BASE["cooling_hours_per_year"])
        a = b = c = 0.0
        for t in range(1, years + 1):
            discount = (1.0 + i) ** -t
            energy = price_kwh * (1.0 + escalation) ** (t - 1)
            peak_t = peak * (1.0 + g) ** (t - 1)
            a += (sc + energy * 8760.0) * discount
            b += (sc * rf + energy * 8760.0 * loss_factor) * peak_t**2 * discount
            c += (sc * rf + energy * cooling) * discount
        tocs = [prices[j] + (a * p0[j] + b * pk[j] + c * paux[j]) / 1000.0 for j in range(n)]
        best = min(tocs)
        wins[tocs.index(best)] += 1
        for j in range(n):
            samples[j].append(tocs[j])
            regret[j] += tocs[j] - best
    percentiles = []
    for column in samples:
        column.sort()
        row = []
        for q in (5.0, 50.0, 95.0):
            h = (len(column) - 1) * q / 100.0
            k = int(h)
            upper = column[min(k + 1, len(column) - 1)]
            row.append(column[k] + (h - k) * (upper - column[k]))
        percentiles.append(row)
    return [w / draws for w in wins], [r / draws for r in regret], percentiles


def timed(work: Callable[[], object]) -> float:
    start = time.perf_counter()
    work()
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--offers", type=int, default=1_000)
    parser.add_argument("--draws", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=9)
    parser.add_argument("--python-draws", type=int, default=200, help="subset scaled linearly")
    parser.add_argument("--python-full", type=int, default=2, help="repeats of the loop on all draws (0: none)")
    parser.add_argument("--memory-draws", type=int, default=100_000)
    args = parser.parse_args()

    columns = synthetic_offers(args.offers)
    rates = rates_of_the_draws(columns, args.draws)
    losses_kw = np.vstack([columns["p0_w"], columns["pk_w"], columns["paux_w"]]) / 1000.0
    price = columns["prices"]

    # The floor and monte_carlo must agree before any time is worth printing.
    result = run_monte_carlo(columns, args.draws)
    floor_share = np.bincount(floor(rates, losses_kw, price), minlength=args.offers) / args.draws
    mc_share = np.array([o.win_probability for o in result.offers])
    # The two sum the four terms in different orders: only near-exact ties could differ.
    moved = int(round(np.abs(floor_share - mc_share).sum() * args.draws / 2))
    assert moved <= args.draws // 10_000, f"{moved} draws have a different winner in the floor"
    assert math.isclose(mc_share.sum(), 1.0, rel_tol=1e-12)

    floor_times, mc_times = [], []
    for _ in range(args.repeats):
        time.sleep(SETTLE_S)
        floor_times.append(timed(lambda: floor(rates, losses_kw, price)))
        time.sleep(SETTLE_S)
        mc_times.append(timed(lambda: run_monte_carlo(columns, args.draws)))
    floor_s, mc_s = min(floor_times), min(mc_times)

    python_s = min(timed(lambda: plain_python(columns, args.python_draws)) for _ in range(3))
    python_scaled_s = python_s * args.draws / args.python_draws
    python_full_s = min(
        (timed(lambda: plain_python(columns, args.draws)) for _ in range(args.python_full)), default=math.nan
    )

    evaluations = args.offers * args.draws
    winners = int(np.count_nonzero(mc_share))
    usable = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    print(f"Monte Carlo, {args.offers:,} offers x {args.draws:,} draws = {evaluations:,} TOC evaluations "
          f"({winners} offers win at least one draw); {os.cpu_count()} CPUs, monte_carlo on "
          f"{min(MAX_WORKERS, usable)} threads; best of {args.repeats}")
    floor_median, mc_median = np.median(floor_times) * 1e3, np.median(mc_times) * 1e3
    print(f"  floor (R @ L + price, argmin):     {floor_s * 1e3:8.1f} ms   (median {floor_median:.1f})")
    print(f"  monte_carlo (everything):          {mc_s * 1e3:8.1f} ms   (median {mc_median:.1f})")
    print(f"  plain Python, all {args.draws:,} draws:     {python_full_s:8.2f} s    (best of {args.python_full})")
    print(f"  plain Python, {args.python_draws} draws:           {python_s * 1e3:8.1f} ms "
          f"-> {python_scaled_s:.2f} s scaled linearly to {args.draws:,} draws")
    ratio = mc_s / floor_s
    print(f"monte_carlo / floor = {ratio:.2f} (target <= 1.5) {'OK' if ratio <= 1.5 else 'MISSED'}")
    loops = (("all draws", python_full_s), (f"{args.python_draws} draws scaled", python_scaled_s))
    for label, python in loops:
        if math.isnan(python):
            continue
        speed_up = python / mc_s
        print(f"speed-up over plain Python = {speed_up:,.0f}x (target >= 100) "
              f"{'OK' if speed_up >= 100 else 'MISSED'}   [loop timed on {label}]")

    tracemalloc.start()
    start = time.perf_counter()
    big = run_monte_carlo(columns, args.memory_draws)
    big_s = time.perf_counter() - start
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    full = 8 * args.memory_draws * args.offers
    assert math.isclose(sum(o.win_probability for o in big.offers), 1.0, rel_tol=1e-12)
    print(f"memory, {args.memory_draws:,} draws x {args.offers:,} offers: peak {peak / 2**20:.1f} MiB traced "
          f"(the whole float64 TOC matrix would be {full / 2**20:,.0f} MiB); {big_s:.2f} s under tracemalloc")


if __name__ == "__main__":
    main()
