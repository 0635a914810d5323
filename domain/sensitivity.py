"""How firm is a tender's ranking? Break-even rates, rate maps, tornado and Monte Carlo.

TOC per unit = price + A * P0 / 1000 + B * Pk / 1000 + C * Paux / 1000, with
A, B, C in currency/kW and the losses in W (docs/references.md R2). Each tool here
asks how far the capitalisation rates, or the inputs they are computed from,
may move before another offer wins:

- ``break_even``: the load rate B* (and no-load rate A*) at which the leader
  and each rival tie, with the side on which the leader stays ahead;
- ``winner_grid`` / ``lower_envelope_lines``: the winning offer over a grid of
  (A, B), and the tie lines bounding each winner's region;
- ``tornado``: one input at a time moved to its low and high value;
- ``monte_carlo``: every input drawn from a distribution, many times.

Tie order (every tool): the leader is the offer that ``domain.toc.rank_offers``
places first, i.e. the lowest TOC per unit, then the lowest unit price, then
the bidder's name casefolded, then the lowest offer_id (then, for offers that
share an id, the bidder as typed and P0, Pk, Paux). It is set up once:
``OfferArrays.from_offers`` puts the offers in that order after TOC, and every
winner is then the first lowest TOC in array order (``lowest_toc_index``), so
an exact tie goes to the lower index. TOC is computed as
``total_owning_cost`` computes it (``OfferArrays.toc``), so "exact" means the
same bits as in the ranking. The Monte Carlo finds its winners with a faster
matrix product whose rounding differs in the last place; a draw where two
offers come that close is costed again as the ranking costs it (see
``monte_carlo``), so a tie there is settled in the same order too.
"""

from __future__ import annotations

import math
import os
import threading
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor, wait
from dataclasses import dataclass
from typing import Any

import numpy as np

from domain._checks import as_output, check_array_range, finite_scalar, float_array, whole_number
from domain.errors import DomainError, InvalidInput
from domain.finance import geometric_sum_from_log
from domain.rates import (
    MAX_HOURS_PER_YEAR,
    MAX_PEAK_LOAD_PU,
    MAX_RATE_PER_YEAR,
    MAX_YEARS,
    CapitalisationRates,
    rates_present_worth,
)
from domain.toc import OfferLosses, toc_terms

__all__ = [
    "OfferArrays",
    "lowest_toc_index",
    "leader_index",
    "split_leader",
    "BreakEven",
    "break_even",
    "break_even_sentences",
    "winner_grid",
    "TieSegment",
    "lower_envelope_lines",
    "RATE_INPUT_NAMES",
    "OPTIONAL_RATE_INPUT_NAMES",
    "present_worth_rates_fn",
    "present_worth_rates_vectorised",
    "InputRange",
    "TornadoRow",
    "tornado",
    "PERCENTILES",
    "OfferOutcome",
    "MonteCarloResult",
    "SimulationCancelled",
    "check_distributions",
    "monte_carlo",
]

# Inputs of the present-worth method (domain.rates.rates_present_worth) that the
# tornado and the Monte Carlo may vary; the optional ones default as there.
RATE_INPUT_NAMES: tuple[str, ...] = (
    "energy_price_per_kwh",
    "energy_escalation",
    "capacity_cost_per_kw_year",
    "discount_rate",
    "years",
    "peak_load_pu",
    "load_growth",
    "loss_factor",
    "responsibility_factor",
    "cooling_hours_per_year",
)
OPTIONAL_RATE_INPUT_NAMES: dict[str, float] = {"hours_per_year": 8760.0, "carbon_cost_per_kwh": 0.0}

# Percentiles of TOC reported by the Monte Carlo [percent].
PERCENTILES: tuple[float, float, float] = (5.0, 50.0, 95.0)

MAX_DRAWS = 10_000_000
# The truncated normal is drawn by rejection; below this share of the normal
# inside [low, high] the loop would mostly throw draws away.
MIN_NORMAL_ACCEPTANCE = 1e-3
# Work-array sizes: small enough to stay in cache, large enough to amortise
# the per-call overhead of numpy (measured by bench/bench_monte_carlo.py).
# Each matrix product makes at most PRODUCT_ELEMENTS outputs from 4 terms:
# OpenBLAS runs such a product on one thread (it splits work above
# M * N * K = 262,144), and waking BLAS threads for these thin products cost
# more than it saved on a 2-core machine, several times more under load. The
# Monte Carlo uses the cores through threads of its own instead (below).
PRODUCT_ELEMENTS = 1 << 16
PERCENTILE_BLOCK_BYTES = 4 << 20  # per thread
RATE_CHUNK_ELEMENTS = 1 << 14
GRID_CHUNK_ELEMENTS = 1 << 20
# Winners are found in tasks of about this many TOC values (several products
# each), so that handing out a task costs little next to its work.
WINNER_TASK_ELEMENTS = 1 << 20
# The Monte Carlo runs its chunks on one thread per usable CPU, at most this
# many (numpy releases the GIL in matmul, argmin and partition). Each thread
# holds its own percentile block, so this also bounds the memory.
MAX_WORKERS = 8
# The Monte Carlo's matrix product and total_owning_cost round differently, by a
# few units in the last place (about 1e-15 of the TOC, all terms being >= 0).
# Where the two lowest TOCs of a draw are closer than this share of the lowest,
# the product cannot be trusted to order them as the ranking does, so the draw is
# costed again as the ranking costs it. Far above the rounding, far below any
# real gap between offers: such draws are rare unless offers tie exactly.
CLOSE_CALL = 2.0**-40
# Draws per span when settling close calls: two spans for the bench's 10,000 draws.
SETTLE_SPAN = 1 << 13


# --------------------------------------------------------------------------- offers


def _offer_column(field: str, values: Any, ids: np.ndarray) -> np.ndarray:
    column = np.array(float_array(field, values), dtype=float)
    if column.shape != ids.shape:
        raise InvalidInput(field, f"needs one value per offer ({ids.size}), got shape {column.shape}")
    bad = ~np.isfinite(column) | (column < 0)
    if np.any(bad):
        index = int(np.flatnonzero(bad)[0])
        raise InvalidInput(field, f"offer {ids[index]}: must be finite and >= 0, got {column[index]!r}")
    column.setflags(write=False)
    return column


@dataclass(frozen=True, eq=False)
class OfferArrays:
    """Offers as parallel arrays, the form the vectorised tools work on.

    Attributes
    ----------
    offer_ids : numpy.ndarray of int64
        Identifier of each offer.
    prices : numpy.ndarray of float64
        Unit price [currency], finite, >= 0.
    p0_w, pk_w, paux_w : numpy.ndarray of float64
        Guaranteed no-load loss P0, load loss Pk and auxiliary loss Paux [W],
        finite, >= 0.

    Notes
    -----
    The arrays are copied and made read-only on construction. Position in the
    arrays is the tie-break order: the lowest index wins an exact tie. Built
    with ``from_offers`` that is the order of ``rank_offers``; built directly,
    the caller's order stands (the arrays carry no bidder names to sort by).
    """

    offer_ids: np.ndarray
    prices: np.ndarray
    p0_w: np.ndarray
    pk_w: np.ndarray
    paux_w: np.ndarray

    def __post_init__(self) -> None:
        ids = np.array(self.offer_ids)
        if ids.ndim != 1:
            raise InvalidInput("offer_ids", f"must be one-dimensional, got shape {ids.shape}")
        if ids.size and not np.issubdtype(ids.dtype, np.integer):
            raise InvalidInput("offer_ids", "must be whole numbers")
        ids = ids.astype(np.int64)
        ids.setflags(write=False)
        object.__setattr__(self, "offer_ids", ids)
        for field in ("prices", "p0_w", "pk_w", "paux_w"):
            object.__setattr__(self, field, _offer_column(field, getattr(self, field), ids))

    @classmethod
    def from_offers(cls, offers: Sequence[OfferLosses]) -> OfferArrays:
        """Arrays from ``OfferLosses``, ordered so that index order breaks ties as rank_offers does.

        Parameters
        ----------
        offers : sequence of domain.toc.OfferLosses

        Returns
        -------
        OfferArrays
            Sorted by unit price, bidder (casefolded), offer_id, bidder as
            typed, P0, Pk, Paux: the keys ``rank_offers`` uses after TOC.

        Notes
        -----
        This sort is the one place the tie order is made: every tool then
        takes the first lowest TOC in array order (``lowest_toc_index``), which
        among offers of exactly equal TOC is the one ``rank_offers`` ranks
        first. The order of ``offers`` does not matter.
        """
        ordered = sorted(
            offers,
            key=lambda o: (
                o.unit_price,
                o.bidder.casefold(),
                o.offer_id,
                o.bidder,
                o.no_load_loss_w,
                o.load_loss_w,
                o.aux_loss_w,
            ),
        )
        return cls(
            offer_ids=np.array([o.offer_id for o in ordered], dtype=np.int64),
            prices=np.array([o.unit_price for o in ordered], dtype=np.float64),
            p0_w=np.array([o.no_load_loss_w for o in ordered], dtype=np.float64),
            pk_w=np.array([o.load_loss_w for o in ordered], dtype=np.float64),
            paux_w=np.array([o.aux_loss_w for o in ordered], dtype=np.float64),
        )

    def __len__(self) -> int:
        return int(self.offer_ids.size)

    def take(self, indices: Any) -> OfferArrays:
        """The offers at ``indices`` (in that order)."""
        index = np.asarray(indices, dtype=np.intp).reshape(-1)
        return OfferArrays(
            offer_ids=self.offer_ids[index],
            prices=self.prices[index],
            p0_w=self.p0_w[index],
            pk_w=self.pk_w[index],
            paux_w=self.paux_w[index],
        )

    def toc(self, no_load_rate_per_kw: Any, load_rate_per_kw: Any, aux_rate_per_kw: Any) -> np.ndarray:
        """TOC per unit [currency] of every offer at rates A, B, C [currency/kW].

        The rates broadcast against a trailing offers axis: scalars give shape
        (n_offers,), arrays of shape S give S + (n_offers,). The expression is
        evaluated in the same order as ``domain.toc.total_owning_cost``, so a
        ranking made from it matches ``rank_offers`` bit for bit.
        """
        a = np.asarray(no_load_rate_per_kw, dtype=float)[..., None]
        b = np.asarray(load_rate_per_kw, dtype=float)[..., None]
        c = np.asarray(aux_rate_per_kw, dtype=float)[..., None]
        return toc_terms(self.prices, self.p0_w, self.pk_w, self.paux_w, a, b, c)[3]


def _need_offers(offers: OfferArrays, minimum: int, field: str = "offers") -> None:
    if not isinstance(offers, OfferArrays):
        raise InvalidInput(field, "must be an OfferArrays (see OfferArrays.from_offers)")
    if len(offers) < minimum:
        raise InvalidInput(field, f"needs at least {minimum} offer(s), got {len(offers)}")


def lowest_toc_index(toc: Any) -> Any:
    """Position of the winning offer along the last axis of a TOC array, ties in array order.

    Parameters
    ----------
    toc : array_like, shape (..., n_offers)
        TOC per unit [currency] of each offer, in ``OfferArrays`` order, as
        ``OfferArrays.toc`` computes it.

    Returns
    -------
    int or numpy.ndarray of intp, shape (...)
        Index of the lowest TOC; among exactly equal TOCs the lowest index.

    Notes
    -----
    numpy's argmin returns the first minimum. With the offers in the order of
    ``OfferArrays.from_offers`` (unit price, bidder casefolded, offer_id after
    TOC) that is the offer ``domain.toc.rank_offers`` ranks first. Every
    winner in this module is found here, so the rule lives in one place (the
    Monte Carlo's faster product settles its close calls here too).

    References
    ----------
    Lowest evaluated cost wins: IEEE C57.120 loss evaluation; tie order our own.
    """
    winners = np.argmin(np.asarray(toc), axis=-1)
    return int(winners) if winners.ndim == 0 else winners


def leader_index(offers: OfferArrays, rates: CapitalisationRates) -> int:
    """Index of the offer with the lowest TOC at ``rates``, ties broken as ``rank_offers`` does.

    Parameters
    ----------
    offers : OfferArrays
        At least one offer.
    rates : CapitalisationRates
        A, B, C [currency/kW].

    Returns
    -------
    int
        Position in ``offers`` of the deterministic leader.

    Notes
    -----
    ``lowest_toc_index`` of TOC = price + (A P0 + B Pk + C Paux) / 1000: on
    an exact tie the lowest index, which for offers from
    ``OfferArrays.from_offers`` is the lowest unit price, then bidder
    casefolded, then offer_id (the order of ``rank_offers``).

    References
    ----------
    Lowest evaluated cost wins: IEEE C57.120 loss evaluation; tie rule our own.
    """
    _need_offers(offers, 1)
    toc = offers.toc(rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw)
    return lowest_toc_index(toc)


def split_leader(offers: OfferArrays, rates: CapitalisationRates) -> tuple[OfferArrays, OfferArrays]:
    """The leader at ``rates`` (ties as ``leader_index``) and the other offers in order, for ``break_even``."""
    lead = leader_index(offers, rates)
    rest = np.delete(np.arange(len(offers)), lead)
    return offers.take([lead]), offers.take(rest)


# --------------------------------------------------------------------------- break-even


@dataclass(frozen=True)
class BreakEven:
    """Where the leader and one rival tie, moving one capitalisation rate at a time.

    Attributes
    ----------
    leader_id, rival_id : int
    margin_now : float
        TOC(rival) - TOC(leader) at the current rates [currency]; > 0 means
        the leader is ahead of this rival now.
    price_gap : float
        Price(rival) - price(leader) [currency].
    no_load_loss_gap_w, load_loss_gap_w, aux_loss_gap_w : float
        Loss of the rival minus loss of the leader [W].
    load_rate_now_per_kw : float
        Current B [currency/kW].
    load_rate_tie_per_kw : float or None
        B* [currency/kW] at which the two tie with A and C held; None when no
        B >= 0 makes them tie (equal load losses, or B* < 0).
    load_rate_side : str or None
        "below" or "above": the leader is ahead while B is on this side of B*.
    no_load_rate_now_per_kw, no_load_rate_tie_per_kw, no_load_rate_side
        The same for A, with B and C held.
    """

    leader_id: int
    rival_id: int
    margin_now: float
    price_gap: float
    no_load_loss_gap_w: float
    load_loss_gap_w: float
    aux_loss_gap_w: float
    load_rate_now_per_kw: float
    load_rate_tie_per_kw: float | None
    load_rate_side: str | None
    no_load_rate_now_per_kw: float
    no_load_rate_tie_per_kw: float | None
    no_load_rate_side: str | None


def _tie_rates(constant: np.ndarray, slope_kw: np.ndarray) -> tuple[list[float | None], list[str | None]]:
    """Roots x* of constant + x * slope_kw = 0 with x* >= 0, and the side where it is > 0."""
    ties: list[float | None] = []
    sides: list[str | None] = []
    for k, s in zip(constant.tolist(), slope_kw.tolist(), strict=True):
        if s == 0.0:
            ties.append(None)
            sides.append(None)
            continue
        root = -k / s + 0.0  # + 0.0 turns -0.0 into 0.0
        if root < 0.0:
            ties.append(None)
            sides.append(None)
            continue
        ties.append(root)
        # The margin rises with the rate when the rival has the larger loss.
        sides.append("above" if s > 0 else "below")
    return ties, sides


def break_even(leader: OfferArrays, rivals: OfferArrays, rates: CapitalisationRates) -> list[BreakEven]:
    """Break-even load and no-load rates between a leader and each rival.

    Parameters
    ----------
    leader : OfferArrays
        Exactly one offer (``split_leader`` gives it).
    rivals : OfferArrays
        The offers to compare it with.
    rates : CapitalisationRates
        Current A, B, C [currency/kW].

    Returns
    -------
    list of BreakEven
        One per rival, in the rivals' order.

    Notes
    -----
    With d = rival - leader (price in currency, losses in kW), the TOC margin
    is M(A, B) = d_price + A dP0 + B dPk + C dPaux; the tie line in the
    (A, B) plane is M = 0. Holding A and C,
    B* = -(d_price + A dP0 + C dPaux) / dPk, and the leader is ahead
    (M > 0) for B above B* when dPk > 0, below B* when dPk < 0. Holding B
    and C, A* = -(d_price + B dPk + C dPaux) / dP0 likewise. No root when
    the loss gap is zero or the root is negative (rates are >= 0). Exactly at
    the tie the lower index in ``OfferArrays`` order wins, as in
    ``leader_index``; a rival tied with the leader now has margin_now 0.

    References
    ----------
    Hand calculation on the TOC formula of IEEE C57.120 loss evaluation.
    """
    _need_offers(leader, 1, "leader")
    if len(leader) != 1:
        raise InvalidInput("leader", f"must hold exactly one offer, got {len(leader)}")
    _need_offers(rivals, 0, "rivals")
    a, b, c = rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw
    d_price = rivals.prices - leader.prices[0]
    d_p0_w = rivals.p0_w - leader.p0_w[0]
    d_pk_w = rivals.pk_w - leader.pk_w[0]
    d_paux_w = rivals.paux_w - leader.paux_w[0]
    d_p0, d_pk, d_paux = d_p0_w / 1000.0, d_pk_w / 1000.0, d_paux_w / 1000.0
    margin = rivals.toc(a, b, c) - leader.toc(a, b, c)[0]
    b_ties, b_sides = _tie_rates(d_price + a * d_p0 + c * d_paux, d_pk)
    a_ties, a_sides = _tie_rates(d_price + b * d_pk + c * d_paux, d_p0)
    leader_id = int(leader.offer_ids[0])
    return [
        BreakEven(
            leader_id=leader_id,
            rival_id=int(rivals.offer_ids[j]),
            margin_now=float(margin[j]),
            price_gap=float(d_price[j]),
            no_load_loss_gap_w=float(d_p0_w[j]),
            load_loss_gap_w=float(d_pk_w[j]),
            aux_loss_gap_w=float(d_paux_w[j]),
            load_rate_now_per_kw=b,
            load_rate_tie_per_kw=b_ties[j],
            load_rate_side=b_sides[j],
            no_load_rate_now_per_kw=a,
            no_load_rate_tie_per_kw=a_ties[j],
            no_load_rate_side=a_sides[j],
        )
        for j in range(len(rivals))
    ]


def _format_rate(value: float) -> str:
    return f"{value:,.0f}" if abs(value) >= 100 else f"{value:,.2f}"


def _rate_sentence(
    label: str, tie: float | None, side: str | None, now: float, ahead: bool, unit: str
) -> str:
    if tie is None or side is None:
        return f"No value of the {label} makes these two tie."
    where = f"{_format_rate(tie)} {unit} (now {_format_rate(now)})"
    if ahead:
        return f"The order holds while the {label} stays {side} {where}."
    verb = "falls below" if side == "below" else "rises above"
    return f"The order reverses if the {label} {verb} {where}."


def break_even_sentences(results: Sequence[BreakEven], currency: str) -> list[tuple[str, str]]:
    """Plain sentences for each ``BreakEven``: (load-rate sentence, no-load-rate sentence).

    Parameters
    ----------
    results : sequence of BreakEven
        From ``break_even``.
    currency : str
        Currency code or symbol shown before "/kW", e.g. "EUR".

    Returns
    -------
    list of (str, str)
        For example ("The order holds while the load rate stays below
        2,340 EUR/kW (now 1,954).", "No value of the no-load rate makes these
        two tie."). When the given leader is not ahead of the rival now the
        sentence says where the order would reverse instead.

    Notes
    -----
    Rates of 100 or more are shown without decimals, smaller ones with two.

    References
    ----------
    Wording our own.
    """
    unit = f"{currency}/kW"
    out = []
    for item in results:
        ahead = item.margin_now > 0
        out.append(
            (
                _rate_sentence(
                    "load rate", item.load_rate_tie_per_kw, item.load_rate_side,
                    item.load_rate_now_per_kw, ahead, unit,
                ),
                _rate_sentence(
                    "no-load rate", item.no_load_rate_tie_per_kw, item.no_load_rate_side,
                    item.no_load_rate_now_per_kw, ahead, unit,
                ),
            )
        )
    return out


# --------------------------------------------------------------------------- rate map


def _rate_axis(field: str, values: Any) -> np.ndarray:
    axis = float_array(field, values)
    if axis.ndim != 1 or axis.size == 0:
        raise InvalidInput(field, "must be a non-empty one-dimensional sequence of rates")
    if np.any(np.isnan(axis)):
        raise InvalidInput(field, "must not contain NaN")
    check_array_range(field, axis, low=0.0)
    return axis


def winner_grid(
    offers: OfferArrays,
    a_values: Any,
    b_values: Any,
    c_rate: float,
    *,
    max_chunk_elements: int = GRID_CHUNK_ELEMENTS,
) -> np.ndarray:
    """Index of the winning offer at each point of a grid of no-load and load rates.

    Parameters
    ----------
    offers : OfferArrays
        At least one offer.
    a_values : array_like
        No-load rates A [currency/kW], >= 0, one-dimensional.
    b_values : array_like
        Load rates B [currency/kW], >= 0, one-dimensional.
    c_rate : float
        Auxiliary rate C [currency/kW], >= 0, held fixed.
    max_chunk_elements : int, optional
        Bound on the TOC values held at once (grid cells x offers).

    Returns
    -------
    numpy.ndarray of int64, shape (len(b_values), len(a_values))
        Row i, column j: index in ``offers`` of the winner at
        (A = a_values[j], B = b_values[i]).

    Notes
    -----
    TOC is evaluated by broadcasting cells x offers in chunks, in the same
    operation order as ``domain.toc.total_owning_cost``; the winner is
    ``lowest_toc_index``, the lowest index on an exact tie (the order of
    ``rank_offers`` for offers from ``OfferArrays.from_offers``).

    References
    ----------
    Lowest evaluated cost wins (IEEE C57.120 loss evaluation); common practice
    for sensitivity maps.
    """
    _need_offers(offers, 1)
    a_axis = _rate_axis("a_values", a_values)
    b_axis = _rate_axis("b_values", b_values)
    c = finite_scalar("c_rate", c_rate, low=0.0)
    chunk = whole_number("max_chunk_elements", max_chunk_elements, low=1)
    cells_b, cells_a = np.meshgrid(b_axis, a_axis, indexing="ij")
    flat_a, flat_b = cells_a.ravel(), cells_b.ravel()
    winners = np.empty(flat_a.size, dtype=np.int64)
    step = max(1, chunk // len(offers))
    for start in range(0, flat_a.size, step):
        stop = min(flat_a.size, start + step)
        toc = offers.toc(flat_a[start:stop], flat_b[start:stop], c)
        winners[start:stop] = lowest_toc_index(toc)
    return winners.reshape(b_axis.size, a_axis.size)


@dataclass(frozen=True)
class TieSegment:
    """A piece of the boundary between two winners' regions in the (A, B) plane.

    Attributes
    ----------
    first_index, second_index : int
        Positions in the OfferArrays, first_index < second_index.
    first_offer_id, second_offer_id : int
    no_load_rate_start_per_kw, load_rate_start_per_kw : float
        One end point (A, B) [currency/kW].
    no_load_rate_end_per_kw, load_rate_end_per_kw : float
        The other end point [currency/kW].
    """

    first_index: int
    second_index: int
    first_offer_id: int
    second_offer_id: int
    no_load_rate_start_per_kw: float
    load_rate_start_per_kw: float
    no_load_rate_end_per_kw: float
    load_rate_end_per_kw: float


def _adjacent_pairs(winners: np.ndarray) -> list[tuple[int, int]]:
    pairs: set[tuple[int, int]] = set()
    neighbours = (
        (winners[:, :-1], winners[:, 1:]),
        (winners[:-1, :], winners[1:, :]),
        (winners[:-1, :-1], winners[1:, 1:]),
        (winners[:-1, 1:], winners[1:, :-1]),
    )
    for left, right in neighbours:
        differ = left != right
        if np.any(differ):
            lo = np.minimum(left[differ], right[differ])
            hi = np.maximum(left[differ], right[differ])
            pairs.update(zip(lo.tolist(), hi.tolist(), strict=True))
    return sorted(pairs)


def lower_envelope_lines(
    offers: OfferArrays,
    a_values: Any,
    b_values: Any,
    c_rate: float,
    winners: np.ndarray | None = None,
) -> list[TieSegment]:
    """Tie lines between neighbouring winners of ``winner_grid``, cut to where both win.

    Parameters
    ----------
    offers, a_values, b_values, c_rate
        As for ``winner_grid``; the grid's ranges bound the segments.
    winners : numpy.ndarray, optional
        The result of ``winner_grid`` for the same arguments (computed when
        omitted).

    Returns
    -------
    list of TieSegment
        One per pair of offers whose cells touch (sides or corners) and whose
        regions share a boundary of positive length inside the ranges.

    Notes
    -----
    Offer k's TOC is the plane f_k(A, B) = alpha_k + A beta_k + B gamma_k with
    alpha_k = price_k + C Paux_k / 1000, beta_k = P0_k / 1000,
    gamma_k = Pk_k / 1000. For a pair (i, j) the tie line f_i = f_j is
    written P(t) = P0 + t v; the segment kept is the interval of t inside
    the rectangle of the ranges and where f_i(P(t)) <= f_k(P(t)) for every
    other k (each a linear inequality in t; one parallel to the line holds
    when within 1e-9 of the largest TOC). Intervals shorter than 1e-6 of the
    rectangle's diagonal are points where regions meet across a corner and
    are dropped. The grid only proposes the pairs; the end points are exact.

    References
    ----------
    Lower envelope of planes (each winner's region is a convex polygon):
    standard computational geometry; clipping in the manner of Liang and
    Barsky (1984).
    """
    _need_offers(offers, 1)
    a_axis = _rate_axis("a_values", a_values)
    b_axis = _rate_axis("b_values", b_values)
    c = finite_scalar("c_rate", c_rate, low=0.0)
    if winners is None:
        winners = winner_grid(offers, a_axis, b_axis, c)
    winners = np.asarray(winners)
    if winners.shape != (b_axis.size, a_axis.size):
        raise InvalidInput("winners", f"must have shape {(b_axis.size, a_axis.size)}, got {winners.shape}")

    alpha = offers.prices + c * offers.paux_w / 1000.0
    beta = offers.p0_w / 1000.0
    gamma = offers.pk_w / 1000.0
    a_lo, a_hi = float(a_axis.min()), float(a_axis.max())
    b_lo, b_hi = float(b_axis.min()), float(b_axis.max())
    corners = offers.toc(np.array([a_lo, a_lo, a_hi, a_hi]), np.array([b_lo, b_hi, b_lo, b_hi]), c)
    tolerance = 1e-9 * max(1.0, float(np.max(np.abs(corners))))
    # Regions that meet only at a point (across a corner) leave an interval of
    # rounding-error length; anything shorter than this is such a point.
    min_length = 1e-6 * math.hypot(a_hi - a_lo, b_hi - b_lo)

    segments = []
    for i, j in _adjacent_pairs(winners):
        d_alpha, d_beta, d_gamma = alpha[j] - alpha[i], beta[j] - beta[i], gamma[j] - gamma[i]
        norm2 = d_beta * d_beta + d_gamma * d_gamma
        if norm2 == 0.0:
            continue
        origin = -d_alpha / norm2 * np.array([d_beta, d_gamma])
        direction = np.array([-d_gamma, d_beta]) / math.sqrt(norm2)
        # Each constraint reads u + t * w <= 0.
        others = np.ones(len(offers), dtype=bool)
        others[[i, j]] = False
        u = np.concatenate(
            [
                [a_lo - origin[0], origin[0] - a_hi, b_lo - origin[1], origin[1] - b_hi],
                (alpha[i] - alpha[others]) + origin[0] * (beta[i] - beta[others])
                + origin[1] * (gamma[i] - gamma[others]),
            ]
        )
        w = np.concatenate(
            [
                [-direction[0], direction[0], -direction[1], direction[1]],
                direction[0] * (beta[i] - beta[others]) + direction[1] * (gamma[i] - gamma[others]),
            ]
        )
        # A constraint parallel to the line holds everywhere on it or nowhere.
        parallel = w == 0
        if np.any(parallel & (u > tolerance)):
            continue
        bound = -u[~parallel] / w[~parallel]
        positive = w[~parallel] > 0
        t_hi = float(np.min(bound[positive])) if np.any(positive) else math.inf
        t_lo = float(np.max(bound[~positive])) if np.any(~positive) else -math.inf
        if not t_hi - t_lo > min_length:
            continue
        start = origin + t_lo * direction
        end = origin + t_hi * direction
        segments.append(
            TieSegment(
                first_index=i,
                second_index=j,
                first_offer_id=int(offers.offer_ids[i]),
                second_offer_id=int(offers.offer_ids[j]),
                no_load_rate_start_per_kw=float(start[0]),
                load_rate_start_per_kw=float(start[1]),
                no_load_rate_end_per_kw=float(end[0]),
                load_rate_end_per_kw=float(end[1]),
            )
        )
    return segments


# --------------------------------------------------------------------------- present-worth rates


def _rate_input_arrays(inputs: Mapping[str, Any]) -> tuple[dict[str, np.ndarray], tuple[int, ...]]:
    """Check the present-worth inputs (arrays or scalars); return float arrays and the broadcast shape."""
    unknown = sorted(set(inputs) - set(RATE_INPUT_NAMES) - set(OPTIONAL_RATE_INPUT_NAMES))
    if unknown:
        raise InvalidInput(unknown[0], "is not an input of the present-worth rates")
    missing = [name for name in RATE_INPUT_NAMES if name not in inputs]
    if missing:
        raise InvalidInput(missing[0], "is required by the present-worth rates")
    values = {name: inputs.get(name, default) for name, default in OPTIONAL_RATE_INPUT_NAMES.items()}
    values.update(inputs)
    arrays = {}
    for name, value in values.items():
        array = float_array(name, value)
        if np.any(np.isnan(array)):
            raise InvalidInput(name, "must not be NaN")
        arrays[name] = array
    try:
        shape = np.broadcast_shapes(*(array.shape for array in arrays.values()))
    except ValueError:
        raise InvalidInput("inputs", "arrays do not broadcast to one shape") from None

    rate_limits: dict[str, Any] = dict(low=-1.0, low_open=True, high=MAX_RATE_PER_YEAR)
    for name in ("energy_escalation", "discount_rate", "load_growth"):
        check_array_range(name, arrays[name], **rate_limits)
    for name in ("energy_price_per_kwh", "capacity_cost_per_kw_year", "carbon_cost_per_kwh"):
        check_array_range(name, arrays[name], low=0.0)
    check_array_range("peak_load_pu", arrays["peak_load_pu"], low=0.0, high=MAX_PEAK_LOAD_PU)
    check_array_range("loss_factor", arrays["loss_factor"], low=0.0, high=1.0)
    check_array_range("responsibility_factor", arrays["responsibility_factor"], low=0.0, high=1.0)
    check_array_range(
        "hours_per_year", arrays["hours_per_year"], low=0.0, low_open=True, high=MAX_HOURS_PER_YEAR
    )
    check_array_range("cooling_hours_per_year", arrays["cooling_hours_per_year"], low=0.0)
    over = arrays["cooling_hours_per_year"] > arrays["hours_per_year"]
    if np.any(over):
        raise InvalidInput("cooling_hours_per_year", "must be <= hours_per_year")
    years = arrays["years"]
    check_array_range("years", years, low=1.0, high=float(MAX_YEARS))
    if np.any(years != np.floor(years)):
        raise InvalidInput("years", "must be whole numbers of years")
    return arrays, shape


def _present_worth_kernel(x: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A, B, C for 1-D input arrays of equal length, already checked (see the public wrapper)."""
    years = x["years"]
    log_discount = np.log1p(x["discount_rate"])
    log_escalation = np.log1p(x["energy_escalation"])
    log_growth = 2.0 * np.log1p(x["load_growth"])
    first = np.exp(-log_discount)
    s_d = first * geometric_sum_from_log(years, -log_discount)
    s_e = first * geometric_sum_from_log(years, log_escalation - log_discount)
    s_g = first * geometric_sum_from_log(years, log_growth - log_discount)
    s_eg = first * geometric_sum_from_log(years, log_escalation + log_growth - log_discount)

    sc, rf = x["capacity_cost_per_kw_year"], x["responsibility_factor"]
    price, carbon = x["energy_price_per_kwh"], x["carbon_cost_per_kwh"]
    hours, cooling = x["hours_per_year"], x["cooling_hours_per_year"]
    a = sc * s_d + hours * (price * s_e + carbon * s_d)
    b = x["peak_load_pu"] ** 2 * (sc * rf * s_g + hours * x["loss_factor"] * (price * s_eg + carbon * s_g))
    c = sc * rf * s_d + cooling * (price * s_e + carbon * s_d)
    return a, b, c


def present_worth_rates_vectorised(inputs_arrays: Mapping[str, Any]) -> tuple[Any, Any, Any]:
    """Present-worth capitalisation rates A, B, C for arrays of inputs at once.

    Parameters
    ----------
    inputs_arrays : mapping of str to float or array_like
        The keywords of ``domain.rates.rates_present_worth`` (RATE_INPUT_NAMES,
        optionally ``hours_per_year`` and ``carbon_cost_per_kwh``) with the
        same units and limits; each a scalar or an array, all broadcast
        together. ``years`` may differ from element to element but must be
        whole. NaN is rejected.

    Returns
    -------
    tuple (A, B, C)
        [currency/kW], each a float for scalar inputs, else a float64 array of
        the broadcast shape.

    Notes
    -----
    Same conventions as ``rates_present_worth``: year t = 1..n, cash flows
    at the end of the year, price_t = price (1 + e)^(t-1),
    peak_t = peak (1 + g)^(t-1). The yearly weights D_t = (1 + i)^-t,
    E_t = (1 + e)^(t-1) D_t, G_t = (1 + g)^(2(t-1)) D_t and
    EG_t = (1 + e)^(t-1) (1 + g)^(2(t-1)) D_t are geometric series, so
    their sums over the years have a closed form: with x = 1, (1 + e),
    (1 + g)^2 or (1 + e)(1 + g)^2 and r = x / (1 + i),

    S_X = sum_t x^(t-1) (1 + i)^-t = (1 + i)^-1 (r^n - 1) / (r - 1),

    and n (1 + i)^-1 when r = 1. It is evaluated as
    expm1(n ln r) / expm1(ln r), with ln r = log1p(.) - log1p(i), which
    keeps its accuracy as r approaches 1 (as when e = i). Then

    A = SC S_D + hours (price S_E + carbon S_D),
    B = peak^2 (SC RF S_G + hours LsF (price S_EG + carbon S_G)),
    C = SC RF S_D + cooling_hours (price S_E + carbon S_D).

    The results agree with the scalar function's year-by-year sums to about
    1e-14 relative.

    References
    ----------
    Present-worth loss-evaluation method as described for IEEE C57.120 and the
    US rural-utility bulletins (REA 65-2, RUS 1724E-301). The sums are the
    geometric-gradient present-worth factor of engineering economics (e.g.
    Newnan, Eschenbach and Lavelle, Engineering Economic Analysis; from
    memory); the expm1/log1p form and the vectorisation are our own.
    """
    arrays, shape = _rate_input_arrays(inputs_arrays)
    size = math.prod(shape)
    flat = {name: np.broadcast_to(array, shape).reshape(-1) for name, array in arrays.items()}
    a = np.empty(size)
    b = np.empty(size)
    c = np.empty(size)
    step = RATE_CHUNK_ELEMENTS
    for start in range(0, size, step):
        part = {name: array[start : start + step] for name, array in flat.items()}
        part_rates = _present_worth_kernel(part)
        a[start : start + step], b[start : start + step], c[start : start + step] = part_rates
    return as_output(a.reshape(shape)), as_output(b.reshape(shape)), as_output(c.reshape(shape))


def present_worth_rates_fn(inputs: Mapping[str, float]) -> tuple[float, float, float]:
    """Rates function for ``tornado``: (A, B, C) from a dict of present-worth inputs.

    Parameters
    ----------
    inputs : mapping of str to float
        The keywords of ``domain.rates.rates_present_worth`` named in
        RATE_INPUT_NAMES, optionally ``hours_per_year`` and
        ``carbon_cost_per_kwh``; ``years`` a whole number.

    Returns
    -------
    tuple of float
        A, B, C [currency/kW].

    Notes
    -----
    Calls ``rates_present_worth`` unchanged; see its formulas.

    References
    ----------
    As ``domain.rates.rates_present_worth``.
    """
    unknown = sorted(set(inputs) - set(RATE_INPUT_NAMES) - set(OPTIONAL_RATE_INPUT_NAMES))
    if unknown:
        raise InvalidInput(unknown[0], "is not an input of the present-worth rates")
    missing = [name for name in RATE_INPUT_NAMES if name not in inputs]
    if missing:
        raise InvalidInput(missing[0], "is required by the present-worth rates")
    kwargs: dict[str, Any] = dict(inputs)
    kwargs["years"] = whole_number("years", kwargs["years"], low=1, high=MAX_YEARS)
    rates = rates_present_worth(**kwargs)
    return rates.no_load_rate_per_kw, rates.load_rate_per_kw, rates.aux_rate_per_kw


def _checked_rates(
    field: str, rates: Any, shape: tuple[int, ...]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    try:
        a, b, c = rates
    except (TypeError, ValueError):
        raise InvalidInput(field, "the rates function must return (A, B, C)") from None
    out = []
    for value in (a, b, c):
        array = np.broadcast_to(float_array(field, value), shape)
        if not np.all(np.isfinite(array)) or np.any(array < 0):
            raise InvalidInput(field, "the rates function returned a rate that is negative or not finite")
        out.append(array)
    return out[0], out[1], out[2]


# --------------------------------------------------------------------------- tornado


@dataclass(frozen=True)
class InputRange:
    """The values one input may take, for clipping a tornado's low and high values.

    Attributes
    ----------
    low, high : float
        Smallest and largest allowed value [the input's own unit]; -inf and
        inf for no bound.
    low_open : bool
        True when ``low`` itself is not allowed (a discount rate above -50 %).
    whole : bool
        True when only whole numbers are allowed (years).

    Notes
    -----
    The limits are the caller's: the application passes those of its cost
    basis form, so that a tornado never moves an input where the form would
    refuse it.
    """

    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    whole: bool = False

    def __post_init__(self) -> None:
        low, high = float(self.low), float(self.high)
        if math.isnan(low) or math.isnan(high) or not (low < high or (low == high and not self.low_open)):
            raise InvalidInput("limits", f"need low < high (or equal and closed), got {low!r} and {high!r}")
        object.__setattr__(self, "low", low)
        object.__setattr__(self, "high", high)

    def clip(self, value: float) -> float:
        """The allowed value nearest ``value``: ``value`` itself when allowed.

        Below an open low bound the result is the next float above it (for
        whole numbers, the next whole number). A value that is inside the
        bounds but not whole is returned as it is: clipping does not round.
        """
        if value <= self.low if self.low_open else value < self.low:
            if self.whole:
                return float(math.floor(self.low) + 1 if self.low_open else math.ceil(self.low))
            return math.nextafter(self.low, math.inf) if self.low_open else self.low
        if value > self.high:
            return float(math.floor(self.high)) if self.whole else self.high
        return value


@dataclass(frozen=True)
class TornadoRow:
    """One input moved to its low and its high value, the others at their base values.

    Attributes
    ----------
    input_name : str
    base_value, low_value, high_value : float
        In the input's own unit; low and high as used, after clipping.
    low_clipped, high_clipped : bool
        Whether the low (high) value asked lay outside the input's allowed
        range and was moved to its nearest allowed value.
    margin_base, margin_low, margin_high : float
        Margin of the base leader [currency]: the lowest TOC among the other
        offers minus the base leader's TOC, with the input at base, low and
        high. Negative when another offer has overtaken the base leader.
    swing : float
        abs(margin_high - margin_low) [currency]; rows are sorted by it.
    leader_id_base, leader_id_low, leader_id_high : int
        Winning offer at each setting (ties as ``leader_index``).
    leader_changed_low, leader_changed_high : bool
        Whether the winner differs from the base leader.
    """

    input_name: str
    base_value: float
    low_value: float
    high_value: float
    margin_base: float
    margin_low: float
    margin_high: float
    swing: float
    leader_id_base: int
    leader_id_low: int
    leader_id_high: int
    leader_changed_low: bool
    leader_changed_high: bool
    low_clipped: bool = False
    high_clipped: bool = False


def _tornado_point(
    rates_fn: Callable[[Mapping[str, float]], Any],
    inputs: Mapping[str, float],
    offers: OfferArrays,
    base_leader: int,
) -> tuple[float, int]:
    a, b, c = (float(v) for v in _checked_rates("rates_fn", rates_fn(inputs), ()))
    toc = offers.toc(a, b, c)
    others = np.delete(toc, base_leader)
    return float(others.min() - toc[base_leader]), lowest_toc_index(toc)


def _input_value(name: str, value: Any) -> float | int:
    if name == "years":
        return whole_number(name, value, low=1)
    return finite_scalar(name, value)


def _range_value(name: str, value: Any, limit: InputRange | None) -> tuple[float | int, bool]:
    """A tornado's low or high value moved into ``limit``, and whether it had to move.

    Clipped before the checks of ``_input_value``, so that 0 years becomes 1
    rather than an error; a fraction of a year is refused, never rounded.
    """
    number = finite_scalar(name, value)
    if name == "years" and not number.is_integer():
        raise InvalidInput(name, f"must be a whole number, got {value!r}")
    moved = number if limit is None else limit.clip(number)
    return _input_value(name, moved), moved != number


def tornado(
    base_inputs: Mapping[str, float],
    ranges: Mapping[str, tuple[float, float]],
    rates_fn: Callable[[Mapping[str, float]], Any],
    offers: OfferArrays,
    limits: Mapping[str, InputRange] | None = None,
) -> list[TornadoRow]:
    """One-at-a-time sensitivity of the leader's margin to the inputs of the rates.

    Parameters
    ----------
    base_inputs : mapping of str to float
        Every input ``rates_fn`` needs, at its base value. ``years`` (when
        present) must be a whole number and stays one.
    ranges : mapping of str to (low, high)
        The inputs to move and their low and high values (same units).
    rates_fn : callable
        Maps an inputs dict to (A, B, C) [currency/kW]; for example
        ``present_worth_rates_fn``.
    offers : OfferArrays
        At least two offers.
    limits : mapping of str to InputRange, optional
        Allowed values of the inputs [their own units]. A low or high value
        outside its input's range is replaced by the nearest allowed value
        (``InputRange.clip``) and the row says so; inputs not named are used
        as given.

    Returns
    -------
    list of TornadoRow
        Sorted by swing, largest first (ties keep the order of ``ranges``).

    Notes
    -----
    For each named input, the inputs are the base values with that input set
    to low, then high; the rates follow from ``rates_fn``, TOC from
    price + (A P0 + B Pk + C Paux) / 1000. The margin is that of the offer
    leading at the base values, so a negative margin tells how far behind it
    has fallen. Leaders are found by ``lowest_toc_index``: on an exact tie the
    offer ``rank_offers`` ranks first (for offers from
    ``OfferArrays.from_offers``).

    References
    ----------
    Tornado diagram: common practice in decision analysis (one-way
    sensitivity), applied here to the TOC ranking.
    """
    _need_offers(offers, 2)
    limits = limits or {}
    base = {name: _input_value(name, value) for name, value in base_inputs.items()}
    a, b, c = (float(v) for v in _checked_rates("rates_fn", rates_fn(base), ()))
    toc = offers.toc(a, b, c)
    base_leader = lowest_toc_index(toc)
    margin_base = float(np.delete(toc, base_leader).min() - toc[base_leader])
    base_id = int(offers.offer_ids[base_leader])

    rows = []
    for name, bounds in ranges.items():
        if name not in base:
            raise InvalidInput(name, "has a range but no base value")
        try:
            low_raw, high_raw = bounds
        except (TypeError, ValueError):
            raise InvalidInput(name, "range must be a (low, high) pair") from None
        low, low_clipped = _range_value(name, low_raw, limits.get(name))
        high, high_clipped = _range_value(name, high_raw, limits.get(name))
        margin_low, lead_low = _tornado_point(rates_fn, {**base, name: low}, offers, base_leader)
        margin_high, lead_high = _tornado_point(rates_fn, {**base, name: high}, offers, base_leader)
        rows.append(
            TornadoRow(
                input_name=name,
                base_value=float(base[name]),
                low_value=float(low),
                high_value=float(high),
                margin_base=margin_base,
                margin_low=margin_low,
                margin_high=margin_high,
                swing=abs(margin_high - margin_low),
                leader_id_base=base_id,
                leader_id_low=int(offers.offer_ids[lead_low]),
                leader_id_high=int(offers.offer_ids[lead_high]),
                leader_changed_low=lead_low != base_leader,
                leader_changed_high=lead_high != base_leader,
                low_clipped=low_clipped,
                high_clipped=high_clipped,
            )
        )
    return sorted(rows, key=lambda row: -row.swing)


# --------------------------------------------------------------------------- Monte Carlo


class SimulationCancelled(DomainError):
    """The caller's ``should_stop`` asked the Monte Carlo to stop; no result is returned."""


@dataclass(frozen=True)
class OfferOutcome:
    """Monte Carlo outcome of one offer.

    Attributes
    ----------
    offer_id : int
    win_probability : float
        Share of the draws this offer wins [0..1].
    toc_p5, toc_p50, toc_p95 : float
        Percentiles 5, 50, 95 of its TOC per unit over the draws [currency].
    toc_mean : float
        Mean TOC per unit [currency].
    expected_regret : float
        Mean over the draws of its TOC minus the lowest TOC of the same draw
        [currency]; 0 for an offer that wins every draw.
    """

    offer_id: int
    win_probability: float
    toc_p5: float
    toc_p50: float
    toc_p95: float
    toc_mean: float
    expected_regret: float


@dataclass(frozen=True)
class MonteCarloResult:
    """Result of ``monte_carlo``.

    Attributes
    ----------
    draws : int
    seed : int
    base_leader_id : int
        Winner at the base inputs (deterministic ranking).
    base_no_load_rate_per_kw, base_load_rate_per_kw, base_aux_rate_per_kw : float
        A, B, C at the base inputs [currency/kW].
    offers : tuple of OfferOutcome
        One per offer, in the order of the OfferArrays.
    """

    draws: int
    seed: int
    base_leader_id: int
    base_no_load_rate_per_kw: float
    base_load_rate_per_kw: float
    base_aux_rate_per_kw: float
    offers: tuple[OfferOutcome, ...]


_DISTRIBUTION_KEYS = {
    "fixed": (set(), {"mode"}),
    "uniform": ({"low", "high"}, set()),
    "triangular": ({"low", "mode", "high"}, set()),
    "normal": ({"mean", "sd", "low", "high"}, set()),
}


def _normal_cdf(z: float) -> float:
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


def _sample_input(
    rng: np.random.Generator, name: str, spec: Mapping[str, Any], base_value: float, draws: int
) -> np.ndarray:
    field = f"distributions[{name}]"
    if not isinstance(spec, Mapping):
        raise InvalidInput(field, "must be a mapping with a 'dist' key")
    kind = spec.get("dist")
    if kind not in _DISTRIBUTION_KEYS:
        raise InvalidInput(field, f"dist must be one of {sorted(_DISTRIBUTION_KEYS)}, got {kind!r}")
    required, optional = _DISTRIBUTION_KEYS[kind]
    given = set(spec) - {"dist"}
    if required - given:
        raise InvalidInput(field, f"{kind} needs {sorted(required - given)}")
    if given - required - optional:
        raise InvalidInput(field, f"{kind} does not use {sorted(given - required - optional)}")
    p = {key: finite_scalar(f"{field}.{key}", spec[key]) for key in given}
    whole_years = name == "years"
    if whole_years:
        # Rounded draws stay inside whole bounds; a fixed value must be whole itself.
        for key in sorted(given & ({"low", "high", "mode"} if kind == "fixed" else {"low", "high"})):
            whole_number(f"{field}.{key}", p[key], low=1)

    if kind == "fixed":
        value = p.get("mode", base_value)
        return np.broadcast_to(np.float64(value), (draws,))
    low, high = p["low"], p["high"]
    if not low < high:
        raise InvalidInput(field, f"needs low < high, got {low:g} and {high:g}")
    if kind == "uniform":
        if whole_years:
            # Each whole year in [low, high] equally likely.
            return rng.integers(int(low), int(high), size=draws, endpoint=True).astype(float)
        return rng.uniform(low, high, size=draws)
    if kind == "triangular":
        if not low <= p["mode"] <= high:
            raise InvalidInput(field, "needs low <= mode <= high")
        values = rng.triangular(low, p["mode"], high, size=draws)
    else:
        mean, sd = p["mean"], p["sd"]
        if not sd > 0:
            raise InvalidInput(f"{field}.sd", f"must be > 0, got {sd:g}")
        accept = _normal_cdf((high - mean) / sd) - _normal_cdf((low - mean) / sd)
        if accept < MIN_NORMAL_ACCEPTANCE:
            raise InvalidInput(
                field,
                "low and high keep less than 0.1 % of this normal distribution; "
                "use a uniform or triangular distribution there",
            )
        values = np.empty(draws)
        filled = 0
        while filled < draws:
            need = draws - filled
            batch = rng.normal(mean, sd, size=min(1 << 22, int(need / accept * 1.1) + 64))
            kept = batch[(batch >= low) & (batch <= high)][:need]
            values[filled : filled + kept.size] = kept
            filled += kept.size
    if whole_years:
        # low and high are whole, so rounding keeps the draws inside them.
        values = np.rint(values)
    return values


def check_distributions(base_inputs: Mapping[str, float], distributions: Mapping[str, Mapping[str, Any]]) -> None:
    """Refuse, without drawing, the distributions ``monte_carlo`` would refuse.

    Parameters
    ----------
    base_inputs, distributions
        As for ``monte_carlo``.

    Raises
    ------
    InvalidInput
        For the first distribution (in sorted name order) that names no base
        value, has an unknown kind, lacks or has extra parameters, or breaks
        a rule of its kind (low < high, low <= mode <= high, sd > 0, whole
        years, a normal cut too short). Whether the draws keep the rate
        inputs in their valid ranges is checked by ``monte_carlo`` itself.

    Notes
    -----
    The same checks as ``monte_carlo`` makes before drawing, so that a
    caller can refuse a request at once and run it later (in the background).

    References
    ----------
    Input checks of this module; no source.
    """
    base = {name: _input_value(name, value) for name, value in base_inputs.items()}
    for name in distributions:
        if name not in base:
            raise InvalidInput(f"distributions[{name}]", "has no base value in base_inputs")
    rng = np.random.default_rng(0)
    for name in sorted(distributions):
        _sample_input(rng, name, distributions[name], base[name], 0)


def _select_order_statistics(block: np.ndarray, ks: Sequence[int]) -> dict[int, np.ndarray]:
    """Order statistics k (0-based) of each row of ``block``, partitioning it in place.

    Partitions at the middle wanted rank, then recurses into the two sides,
    so p5, p50 and p95 cost about two full partitions; a wanted rank at the
    end of a segment is that segment's min or max.
    """
    found: dict[int, np.ndarray] = {}

    def solve(lo: int, hi: int, wanted: list[int]) -> None:
        if not wanted:
            return
        segment = block[:, lo:hi]
        if wanted == [lo]:
            found[lo] = segment.min(axis=1)
            return
        if wanted == [hi - 1]:
            found[hi - 1] = segment.max(axis=1)
            return
        middle = wanted[len(wanted) // 2]
        segment.partition(middle - lo, axis=1)
        found[middle] = block[:, middle].copy()
        solve(lo, middle, [k for k in wanted if k < middle])
        solve(middle + 1, hi, [k for k in wanted if k > middle])

    solve(0, block.shape[1], sorted(set(ks)))
    return found


def _linear_percentiles(block: np.ndarray, percentiles: Sequence[float]) -> np.ndarray:
    """Percentiles of each row by linear interpolation (numpy's default), rows x percentiles."""
    n = block.shape[1]
    plan = []
    for q in percentiles:
        position = (n - 1) * (q / 100.0)
        k = min(int(math.floor(position)), n - 1)
        plan.append((k, min(k + 1, n - 1), position - k))
    stats = _select_order_statistics(block, [k for k, k1, g in plan] + [k1 for k, k1, g in plan if g > 0])
    out = np.empty((block.shape[0], len(plan)))
    for column, (k, k1, g) in enumerate(plan):
        low = stats[k]
        if g == 0:
            out[:, column] = low
            continue
        step = stats[k1] - low
        # numpy's lerp: from the nearer end, so g = 1 returns the upper value exactly.
        out[:, column] = low + step * g if g < 0.5 else stats[k1] - step * (1.0 - g)
    return out


def _usable_cpus() -> int:
    """CPUs this process may run on (its affinity mask where the platform has one)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform (macOS, Windows)
        return os.cpu_count() or 1


def _spans(size: int, step: int) -> list[tuple[int, int]]:
    """(start, stop) pairs that cover range(size) in steps of ``step``."""
    return [(start, min(size, start + step)) for start in range(0, size, step)]


def _run_spans(
    pool: ThreadPoolExecutor,
    workers: int,
    spans: Sequence[tuple[int, int]],
    work: Callable[[int, int, Any], None],
    scratch: Callable[[], Any],
    report: Callable[[int], None],
) -> None:
    """Call ``work(start, stop, own)`` for every span, here and on ``workers - 1`` threads of ``pool``.

    Each thread makes its own scratch ``own`` once, then takes the next span
    whenever it is free, so the spans must write to disjoint outputs and the
    result cannot depend on the number of threads. Only this thread calls
    ``report(done)``, with the number of items done so far by all threads:
    after each span it runs, and at the end if the last spans ran elsewhere.
    When ``report`` or ``work`` raises, no further span starts, and the
    exception propagates once the spans in hand are finished: no thread is
    left writing after this returns.
    """
    remaining = iter(spans)
    lock = threading.Lock()
    quitting = threading.Event()
    done = reported = 0
    failed: list[BaseException] = []

    def run(reporting: bool) -> None:
        nonlocal done, reported
        own = scratch()
        while True:
            with lock:
                span = None if quitting.is_set() else next(remaining, None)
            if span is None:
                return
            work(*span, own)
            with lock:
                done += span[1] - span[0]
                so_far = done
            if reporting:
                report(so_far)
                reported = so_far

    def helper() -> None:
        try:
            run(reporting=False)
        except BaseException as exc:  # handed to the calling thread, which raises it
            failed.append(exc)
            quitting.set()

    # The calling thread works too: it starts at once, while a pool thread
    # may take a scheduler tick to wake.
    helpers = [pool.submit(helper) for _ in range(min(workers, len(spans)) - 1)]
    try:
        run(reporting=True)
    finally:
        quitting.set()
        wait(helpers)
    if failed:
        raise failed[0]
    if done > reported:
        report(done)


def monte_carlo(
    offers: OfferArrays,
    base_inputs: Mapping[str, float],
    distributions: Mapping[str, Mapping[str, Any]],
    draws: int,
    seed: int,
    rates_fn: Callable[[Mapping[str, np.ndarray]], Any] | None = None,
    chunk_size: int | None = None,
    *,
    percentile_block_bytes: int = PERCENTILE_BLOCK_BYTES,
    workers: int | None = None,
    progress: Callable[[float], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> MonteCarloResult:
    """Win probabilities, TOC percentiles and expected regret under uncertain rate inputs.

    Parameters
    ----------
    offers : OfferArrays
        At least one offer.
    base_inputs : mapping of str to float
        Every input of the rates, at its base value (units as the rates
        function takes them; fractions per year for rates of interest).
    distributions : mapping of str to mapping
        Per input name, {"dist": "fixed" | "uniform" | "triangular" |
        "normal", ...}: fixed uses "mode" if given, else the base value;
        uniform needs "low", "high"; triangular "low", "mode", "high"; normal
        "mean", "sd", "low", "high" (truncated to [low, high]). Inputs not
        named stay at their base value. For ``years`` the bounds must be
        whole: uniform picks whole years with equal chance, the others are
        rounded to the nearest year.
    draws : int
        Number of draws, 1..10,000,000.
    seed : int
        Seed of ``numpy.random.default_rng``, >= 0.
    rates_fn : callable, optional
        Vectorised rates: maps a dict of 1-D input arrays (equal length;
        ``years`` as whole-valued floats) to (A, B, C) arrays [currency/kW].
        It is called once with the base inputs (length 1), then chunk by
        chunk. Default: the present-worth method, as
        ``present_worth_rates_vectorised``.
    chunk_size : int, optional
        Draws per matrix product when finding winners; default
        65,536 // offers (see PRODUCT_ELEMENTS). A chunk of winners is a run
        of such products of about WINNER_TASK_ELEMENTS TOC values.
    percentile_block_bytes : int, optional
        Bytes of TOC values each thread holds per block of offers for the
        percentiles (at least one offer's draws). Default 4 MiB.
    workers : int, optional
        Threads to run the chunks on, the calling thread included, >= 1;
        default the usable CPUs, at most MAX_WORKERS. The result does not
        depend on it.
    progress : callable, optional
        Called on the calling thread with the fraction done (0..1) after each
        chunk that thread runs (of rates, of winners, or a block of offers)
        and at the end of each pass.
    should_stop : callable, optional
        Checked on the calling thread before each call of ``progress``; when
        it returns True, no further chunk starts and SimulationCancelled is
        raised once the chunks in hand are finished.

    Returns
    -------
    MonteCarloResult

    Notes
    -----
    Sampling: one ``default_rng(seed)`` draws every input in sorted name
    order, all draws at once, so a result depends on (inputs, distributions,
    draws, seed) and not on the chunk sizes. The truncated normal is drawn by
    rejection (draws outside [low, high] are discarded and replaced), which
    gives exactly the truncated distribution; it is refused when [low, high]
    holds under 0.1 % of the normal.

    Per draw the rates row r = [1, A, B, C] and the offers' matrix
    L = [price; P0/1000; Pk/1000; Paux/1000] give TOC = r @ L, i.e.
    price + (A P0 + B Pk + C Paux) / 1000, computed chunk by chunk as one
    matrix product. The winner is the first lowest TOC in ``offers`` order.
    The product rounds differently from ``domain.toc.total_owning_cost`` (a
    few units in the last place), so where another offer's TOC is within
    CLOSE_CALL (2^-40) of a draw's winner's, that draw is costed again with
    ``OfferArrays.toc``, as the ranking costs it, and its winner is
    ``lowest_toc_index`` of those values: an exact tie in the ranking's
    arithmetic goes to the offer ``rank_offers`` ranks first (for offers
    from ``OfferArrays.from_offers``), in every draw. The candidates are
    screened by a bound over each winner's draws, so this costs a small
    share of the argmin (``_settle_close_calls``). Win probability =
    wins / draws; the base leader is found in the ranking's arithmetic too.

    Threads: the rates (unless ``rates_fn`` is given, which is called in
    order on the calling thread), the winners and the percentiles are each
    computed in chunks that threads take in turn; each chunk writes only its
    own rows, and the chunk boundaries do not depend on the thread count, so
    neither does any value returned. The close calls are settled, and the
    sums (win counts, regret, mean) taken, afterwards on the calling thread.

    Expected regret of offer j = mean over draws of TOC_j - min_k TOC_k,
    computed from the winners alone: with n_w draws won by w and s_w the sum
    of their rate rows, sum over draws = sum_w [n_w (price_j - price_w) +
    s_w . (L_j - L_w)], clipped at 0 against rounding. It is exactly 0 for
    an offer that wins every draw.

    Percentiles: exact, numpy's default "linear" definition (Hyndman and Fan
    type 7) on the float64 TOC values. A second pass recomputes TOC for a
    block of offers over all draws and selects the needed order statistics
    with ``numpy.partition``; no binning or sketch, so the values returned
    are order statistics of the computed TOCs, interpolated as numpy does,
    and the only error is the float64 rounding of TOC itself (a few units in
    the last place). Memory: draws x (varied inputs + 5) x 8 bytes plus, per
    thread, the work blocks (percentile_block_bytes, or one offer's draws if
    larger): about 12 MiB at peak for 100,000 draws and 1,000 offers on 2
    threads (bench; 4 MiB more per further thread), where the whole float64
    TOC matrix would take 763 MiB.

    References
    ----------
    Monte Carlo analysis of capitalisation rates: common practice. Sample
    quantiles: R. J. Hyndman and Y. Fan, "Sample quantiles in statistical
    packages", The American Statistician 50 (4), 1996, definition 7.
    Regret: Savage's minimax-regret notion, averaged (common practice).
    """
    _need_offers(offers, 1)
    n_draws = whole_number("draws", draws, low=1, high=MAX_DRAWS)
    seed_value = whole_number("seed", seed, low=0)
    n_offers = len(offers)
    if chunk_size is None:
        chunk = max(1, PRODUCT_ELEMENTS // n_offers)
    else:
        chunk = whole_number("chunk_size", chunk_size, low=1)
    block_bytes = whole_number("percentile_block_bytes", percentile_block_bytes, low=1)
    if workers is None:
        n_workers = min(MAX_WORKERS, _usable_cpus())
    else:
        n_workers = whole_number("workers", workers, low=1)

    base = {name: _input_value(name, value) for name, value in base_inputs.items()}
    for name in distributions:
        if name not in base:
            raise InvalidInput(f"distributions[{name}]", "has no base value in base_inputs")

    rng = np.random.default_rng(seed_value)
    samples: dict[str, np.ndarray] = {
        name: np.broadcast_to(np.float64(value), (n_draws,)) for name, value in base.items()
    }
    for name in sorted(distributions):
        samples[name] = _sample_input(rng, name, distributions[name], base[name], n_draws)

    base_rows = {name: np.array([float(value)]) for name, value in base.items()}
    if rates_fn is None:
        # Check every draw before any work; the kernel then runs unchecked.
        checked = _rate_input_arrays(samples)[0]
        samples = {name: np.broadcast_to(array, (n_draws,)) for name, array in checked.items()}
        del checked  # samples.clear() below then frees the draws
        base_rows = _rate_input_arrays(base_rows)[0]
        compute: Callable[[Mapping[str, np.ndarray]], Any] = _present_worth_kernel
    else:
        compute = rates_fn
    base_rates = _checked_rates("base_inputs", compute(base_rows), (1,))
    base_a, base_b, base_c = (float(rate[0]) for rate in base_rates)
    base_leader = lowest_toc_index(offers.toc(base_a, base_b, base_c))

    def report(fraction: float) -> None:
        if should_stop is not None and should_stop():
            raise SimulationCancelled("monte_carlo: stopped by the caller")
        if progress is not None:
            progress(min(1.0, fraction))

    # Rate rows [1, A, B, C], stored as columns (4, draws): TOC = rows @ L in
    # one product, and each row of L.T @ columns is one offer's TOC over the
    # draws, for its percentiles. The rates are kept as drawn (the losses
    # carry the / 1000), so that a close call can be costed again exactly.
    rate_columns = np.empty((4, n_draws))
    rate_columns[0] = 1.0
    rate_rows = rate_columns.T

    def rates_of(start: int, stop: int, _: None) -> None:
        part = {name: array[start:stop] for name, array in samples.items()}
        a, b, c = _checked_rates("rates_fn", compute(part), (stop - start,))
        rate_columns[1, start:stop] = a
        rate_columns[2, start:stop] = b
        rate_columns[3, start:stop] = c

    # (4, offers): price [currency], P0, Pk, Paux [kW]
    losses = np.vstack([offers.prices, offers.p0_w / 1000.0, offers.pk_w / 1000.0, offers.paux_w / 1000.0])
    losses_by_offer = np.ascontiguousarray(losses.T)  # (offers, 4)
    winners = np.empty(n_draws, dtype=np.intp)

    def winners_of(first: int, last: int, work: np.ndarray) -> None:
        for start in range(first, last, chunk):
            stop = min(last, start + chunk)
            toc = work[: stop - start]
            np.matmul(rate_rows[start:stop], losses, out=toc)
            toc.argmin(axis=1, out=winners[start:stop])

    rows_per_block = max(1, min(n_offers, block_bytes // (8 * n_draws)))
    quantiles = np.empty((n_offers, len(PERCENTILES)))

    def percentiles_of(start: int, stop: int, block: np.ndarray) -> None:
        toc = block[: stop - start]
        _toc_by_offer(losses_by_offer[start:stop], rate_columns, toc)
        quantiles[start:stop] = _linear_percentiles(toc, PERCENTILES)

    helper_threads = ThreadPoolExecutor(max(1, n_workers - 1), thread_name_prefix="monte_carlo_helper")
    with helper_threads as pool:
        # A caller's rates_fn is called in order, on this thread: it need not be thread-safe.
        _run_spans(
            pool,
            n_workers if rates_fn is None else 1,
            _spans(n_draws, RATE_CHUNK_ELEMENTS),
            rates_of,
            lambda: None,
            lambda done: report(0.05 * done / n_draws),
        )
        samples.clear()  # the draws are no longer needed
        _run_spans(
            pool,
            n_workers,
            _spans(n_draws, chunk * max(1, WINNER_TASK_ELEMENTS // (chunk * n_offers))),
            winners_of,
            lambda: np.empty((min(chunk, n_draws), n_offers)),
            lambda done: report(0.05 + 0.25 * done / n_draws),
        )
        if n_offers > 1:
            # Offers alike in price and losses tie at any rates, whatever the rounding: the first
            # of them takes the draw. Then the close calls, span by span (see _settle_close_calls).
            twins = _first_twins(losses)
            if twins is not None:
                winners[:] = twins[winners]
            winner_keys = winners.astype(np.uint16) if n_offers <= 1 << 16 else winners

            def settle(start: int, stop: int, _: None) -> None:
                _settle_close_calls(offers, losses, rate_columns[:, start:stop], winners[start:stop],
                                    winner_keys[start:stop])

            _run_spans(pool, n_workers, _spans(n_draws, SETTLE_SPAN), settle, lambda: None,
                       lambda done: report(0.3))

        wins = np.bincount(winners, minlength=n_offers)
        regret = _regret_sums(winners, wins, rate_rows, losses) / n_draws
        toc_mean = rate_columns.mean(axis=1) @ losses
        _run_spans(
            pool,
            n_workers,
            _spans(n_offers, rows_per_block),
            percentiles_of,
            lambda: np.empty((rows_per_block, n_draws)),
            lambda done: report(0.3 + 0.7 * done / n_offers),
        )

    columns = zip(
        offers.offer_ids.tolist(),
        (wins / n_draws).tolist(),
        *quantiles.T.tolist(),
        toc_mean.tolist(),
        regret.tolist(),
        strict=True,
    )
    outcomes = tuple(OfferOutcome(*row) for row in columns)
    return MonteCarloResult(
        draws=n_draws,
        seed=seed_value,
        base_leader_id=int(offers.offer_ids[base_leader]),
        base_no_load_rate_per_kw=base_a,
        base_load_rate_per_kw=base_b,
        base_aux_rate_per_kw=base_c,
        offers=outcomes,
    )


def _first_twins(losses: np.ndarray) -> np.ndarray | None:
    """For each offer, the first offer alike in price and losses (itself if none), or None when
    no two offers are alike. ``losses`` is (4, offers)."""
    prices = np.sort(losses[0])
    if not np.any(prices[1:] == prices[:-1]):
        return None  # the usual case, found without sorting the losses
    order = np.lexsort(losses)
    ordered = losses[:, order]
    alike = np.all(ordered[:, 1:] == ordered[:, :-1], axis=0)
    if not alike.any():
        return None
    new_group = np.concatenate([[True], ~alike])
    twins = np.empty(losses.shape[1], dtype=np.intp)
    twins[order] = np.minimum.reduceat(order, np.flatnonzero(new_group))[np.cumsum(new_group) - 1]
    return twins


def _settle_close_calls(
    offers: OfferArrays,
    losses: np.ndarray,
    rate_columns: np.ndarray,
    winners: np.ndarray,
    winner_keys: np.ndarray,
) -> None:
    """Correct, in place, the winners of a span of draws the matrix product may have got wrong.

    ``losses`` is (4, offers) [price, P0, Pk, Paux in kW], ``rate_columns``
    (4, draws) the span's rate rows [1, A, B, C], ``winners`` its winners
    (already moved to the first of offers alike, ``_first_twins``) and
    ``winner_keys`` the same as 16-bit keys where they fit. Only ``winners``
    is written.

    A draw is a close call when another offer's TOC is within CLOSE_CALL of
    its winner's; it is costed again with ``OfferArrays.toc`` (the ranking's
    arithmetic) and won by ``lowest_toc_index`` of that. Looking at every
    offer of every draw again would cost as much as the argmin. Instead the
    draws are put in order of winner, then of the rate that moves the
    offers' TOCs most, and cut into blocks of one winner w and similar rates.
    Over the box of a block's rate rows, TOC_j - TOC_w = r . (L_j - L_w) is
    bounded below (each term at the end of its range that makes it least);
    only the offers whose bound does not clear the tolerance are costed, in
    that block. Every draw within CLOSE_CALL of its winner is costed again
    wherever the spans and blocks start, and a draw costed again without need
    keeps its winner (its gap is far above the rounding), so the result does
    not depend on them. On the bench's tender (1,000 offers, six winners)
    about 1 % of the argmin's products are made again.
    """
    n_offers = losses.shape[1]
    block = 2048  # draws of one winner per box at most
    low, high = rate_columns.min(axis=1), rate_columns.max(axis=1)
    steer = 1 + int(np.argmax((high - low)[1:] * np.ptp(losses[1:], axis=1)))
    # 16-bit keys: numpy's stable sort of them is a radix sort, linear in the draws.
    rate_keys = ((rate_columns[steer] - low[steer]) * (65535.0 / ((high - low)[steer] or 1.0))).astype(np.uint16)
    draws = np.lexsort((rate_keys, winner_keys))
    rates, won = np.take(rate_columns, draws, axis=1), winners[draws]
    # A block starts where the winner changes, and every ``block`` draws of one winner.
    runs = np.append(np.flatnonzero(np.concatenate([[True], won[1:] != won[:-1]])), won.size)
    starts = np.concatenate([np.arange(runs[k], runs[k + 1], block) for k in range(runs.size - 1)])
    stops = np.append(starts[1:], won.size)
    lows, highs = np.minimum.reduceat(rates, starts, axis=1), np.maximum.reduceat(rates, starts, axis=1)
    block_winners = won[starts]
    # TOC grows with every rate, so the winner's TOC at the top of the box bounds it in the
    # block; the tolerance taken from it is as far from the rounding and from real gaps.
    tolerance = CLOSE_CALL * np.einsum("ib,ib->b", losses[:, block_winners], highs)
    close = []
    # The bounds of a few blocks at a time: (4, blocks, offers) values, about 32 MiB at most.
    per_group = max(1, (1 << 20) // n_offers)
    for group in range(0, starts.size, per_group):
        boxes = slice(group, group + per_group)
        gaps = losses[:, None, :] - losses[:, block_winners[boxes], None]  # L_j - L_w
        low_b, high_b = lows[1:, boxes, None], highs[1:, boxes, None]
        bound = gaps[0] + np.minimum(gaps[1:] * low_b, gaps[1:] * high_b).sum(axis=0)
        # Twice the tolerance: the bound itself is rounded. A twin of w is no rival.
        near = (bound <= 2.0 * tolerance[boxes, None]) & np.any(gaps, axis=0)
        for box in np.flatnonzero(near.any(axis=1)).tolist():
            rivals = np.ascontiguousarray(gaps[:, box, near[box]].T)  # (rivals, 4)
            step = max(1, PRODUCT_ELEMENTS // rivals.shape[0])
            first, last, limit = starts[group + box], stops[group + box], tolerance[group + box]
            for k in range(first, last, step):
                stop = min(last, k + step)
                close.append(draws[k:stop][(rivals @ rates[:, k:stop]).min(axis=0) <= limit])
    again = np.concatenate(close) if close else draws[:0]
    recost = max(1, PRODUCT_ELEMENTS // n_offers)
    for k in range(0, again.size, recost):
        part = again[k : k + recost]
        a, b, c = rate_columns[1:, part]
        winners[part] = lowest_toc_index(offers.toc(a, b, c))


def _toc_by_offer(losses_by_offer: np.ndarray, rates_by_column: np.ndarray, out: np.ndarray) -> None:
    """out[j, d] = losses_by_offer[j] . rates_by_column[:, d], in products of at most PRODUCT_ELEMENTS."""
    n_rows, n_draws = out.shape
    # Tiles as tall as the block, so that BLAS packs a tile's rates once for
    # all its offers (full-width tiles of a few offers each took up to 1.6x
    # as long, measured on blocks of 13 to 104 offers x 10,000 draws).
    rows = min(n_rows, PRODUCT_ELEMENTS)
    columns = max(1, PRODUCT_ELEMENTS // rows)
    for top in range(0, n_rows, rows):
        bottom = min(n_rows, top + rows)
        for start in range(0, n_draws, columns):
            stop = min(n_draws, start + columns)
            # Each row of the tile is contiguous, so matmul writes into it directly.
            np.matmul(
                losses_by_offer[top:bottom],
                rates_by_column[:, start:stop],
                out=out[top:bottom, start:stop],
            )


def _regret_sums(
    winners: np.ndarray, wins: np.ndarray, rate_rows: np.ndarray, losses: np.ndarray
) -> np.ndarray:
    """Sum over draws of TOC_j - TOC_winner, grouped by winner (see monte_carlo, Notes)."""
    n_offers = losses.shape[1]
    winning = np.flatnonzero(wins)
    # Sum of the rate rows of the draws each offer won; column 0 counts them.
    won_rows = np.stack(
        [np.bincount(winners, weights=rate_rows[:, k], minlength=n_offers)[winning] for k in range(4)],
        axis=1,
    )
    won_rows[:, 0] = wins[winning]
    total = np.zeros(n_offers)
    for start in range(0, winning.size, 64):
        w = winning[start : start + 64]
        # (winners, 4, 1) * ((1, 4, offers) - (winners, 4, 1)) summed over the 4 rows.
        gaps = losses[None, :, :] - losses[:, w].T[:, :, None]
        total += np.einsum("wk,wkj->j", won_rows[start : start + 64], gaps)
    return np.maximum(total, 0.0)
