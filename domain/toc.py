"""Total owning cost (TOC) of transformer offers and their ranking.

TOC per unit = unit price + A * P0 + B * Pk + C * Paux, losses in kW (the
offers carry them in W, divided by 1000 here). The lowest TOC wins.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np

from domain._checks import as_output, check_array_range, finite_scalar, float_array, whole_number
from domain.efficiency import efficiency
from domain.errors import InvalidInput
from domain.rates import CapitalisationRates

__all__ = [
    "toc_terms",
    "OfferLosses",
    "RankedOffer",
    "TocBreakdown",
    "total_owning_cost",
    "rank_offers",
    "EFFICIENCY_LOADINGS_PCT",
]

# Loadings [percent of rating] at which each ranked offer reports its efficiency.
EFFICIENCY_LOADINGS_PCT: tuple[int, ...] = (25, 50, 75, 100)


@dataclass(frozen=True)
class OfferLosses:
    """One offer as the ranking needs it: price and guaranteed losses.

    Attributes
    ----------
    offer_id : int
        Identifier of the offer (unique within a tender).
    bidder : str
        Bidder's name as entered.
    unit_price : float
        Price of one unit [currency].
    no_load_loss_w, load_loss_w, aux_loss_w : float
        Guaranteed no-load loss P0, load loss at rated current Pk and
        auxiliary (cooling) loss Paux [W].
    """

    offer_id: int
    bidder: str
    unit_price: float
    no_load_loss_w: float
    load_loss_w: float
    aux_loss_w: float = 0.0


@dataclass(frozen=True)
class RankedOffer:
    """One offer's place in the ranking with its cost breakdown per unit.

    Attributes
    ----------
    rank : int
        Position 1..n, lowest TOC first.
    offer_id, bidder, unit_price
        As in the offer [unit_price in currency].
    capitalised_no_load, capitalised_load, capitalised_aux : float
        A * P0, B * Pk, C * Paux for one unit [currency].
    toc_per_unit : float
        Total owning cost of one unit [currency].
    toc_total : float
        quantity * toc_per_unit [currency].
    efficiency_pct : dict[int, float]
        Efficiency [percent] at unity power factor, keyed by loading in percent
        of rating (25, 50, 75, 100), from P0 and Pk only.
    """

    rank: int
    offer_id: int
    bidder: str
    unit_price: float
    capitalised_no_load: float
    capitalised_load: float
    capitalised_aux: float
    toc_per_unit: float
    toc_total: float
    efficiency_pct: dict[int, float] = field(hash=False)

    @property
    def efficiency_50_pct(self) -> float:
        """Efficiency at 50 % loading, unity power factor [percent]."""
        return self.efficiency_pct[50]


class TocBreakdown(NamedTuple):
    """Parts of the total owning cost of one unit [currency].

    Each member is a Python float when the inputs were scalars, else an array
    of the broadcast shape.
    """

    capitalised_no_load: Any
    capitalised_load: Any
    capitalised_aux: Any
    toc_per_unit: Any


def toc_terms(
    unit_price: Any,
    no_load_loss_w: Any,
    load_loss_w: Any,
    aux_loss_w: Any,
    no_load_rate_per_kw: Any,
    load_rate_per_kw: Any,
    aux_rate_per_kw: Any,
) -> tuple[Any, Any, Any, Any]:
    """The capitalised losses and the TOC per unit, unchecked: the one expression every tool evaluates.

    Parameters
    ----------
    unit_price, no_load_loss_w, load_loss_w, aux_loss_w : array_like
        Price [currency], guaranteed P0, Pk, Paux [W], already checked by the caller.
    no_load_rate_per_kw, load_rate_per_kw, aux_rate_per_kw : array_like
        A, B, C [currency/kW], broadcasting against the offers.

    Returns
    -------
    tuple
        (A P0 / 1000, B Pk / 1000, C Paux / 1000, TOC) [currency], broadcast.

    Notes
    -----
    TOC = price + A P0 / 1000 + B Pk / 1000 + C Paux / 1000, added left to right, so
    ``total_owning_cost`` and the robustness tools (``domain.sensitivity.OfferArrays.toc``)
    give the same number bit for bit and agree on exact ties.

    References
    ----------
    As ``total_owning_cost``.
    """
    no_load = no_load_rate_per_kw * no_load_loss_w / 1000.0
    load = load_rate_per_kw * load_loss_w / 1000.0
    aux = aux_rate_per_kw * aux_loss_w / 1000.0
    return no_load, load, aux, unit_price + no_load + load + aux


def total_owning_cost(
    unit_price: Any,
    no_load_loss_w: Any,
    load_loss_w: Any,
    aux_loss_w: Any,
    rates: CapitalisationRates,
) -> TocBreakdown:
    """Total owning cost of one unit: price plus capitalised guaranteed losses.

    Parameters
    ----------
    unit_price : float or array_like
        Price of one unit [currency], >= 0.
    no_load_loss_w : float or array_like
        Guaranteed no-load loss P0 [W], >= 0.
    load_loss_w : float or array_like
        Guaranteed load loss at rated current Pk [W], >= 0.
    aux_loss_w : float or array_like
        Guaranteed auxiliary (cooling) loss Paux [W], >= 0.
    rates : CapitalisationRates
        A, B, C [currency/kW].

    Returns
    -------
    TocBreakdown
        capitalised_no_load, capitalised_load, capitalised_aux, toc_per_unit
        [currency], broadcast over the inputs. NaN propagates.

    Notes
    -----
    TOC = price + A * P0 / 1000 + B * Pk / 1000 + C * Paux / 1000. The
    guaranteed values are used as they stand: test tolerances do not enter.

    References
    ----------
    Loss-evaluation method of IEEE C57.120 and the US rural-utility bulletins
    (REA 65-2, RUS 1724E-301).
    """
    price = float_array("unit_price", unit_price)
    p0 = float_array("no_load_loss_w", no_load_loss_w)
    pk = float_array("load_loss_w", load_loss_w)
    paux = float_array("aux_loss_w", aux_loss_w)
    check_array_range("unit_price", price, low=0.0)
    check_array_range("no_load_loss_w", p0, low=0.0)
    check_array_range("load_loss_w", pk, low=0.0)
    check_array_range("aux_loss_w", paux, low=0.0)

    no_load, load, aux, toc = toc_terms(price, p0, pk, paux, rates.no_load_rate_per_kw, rates.load_rate_per_kw,
                                        rates.aux_rate_per_kw)
    shape = toc.shape
    return TocBreakdown(
        capitalised_no_load=as_output(np.broadcast_to(no_load, shape)),
        capitalised_load=as_output(np.broadcast_to(load, shape)),
        capitalised_aux=as_output(np.broadcast_to(aux, shape)),
        toc_per_unit=as_output(toc),
    )


def _offer_column(offers: Sequence[OfferLosses], name: str) -> np.ndarray:
    values = np.array([getattr(offer, name) for offer in offers], dtype=float)
    bad = ~np.isfinite(values) | (values < 0)
    if np.any(bad):
        index = int(np.flatnonzero(bad)[0])
        raise InvalidInput(
            name,
            f"offer {offers[index].offer_id}: must be finite and >= 0, got {values[index]!r}",
        )
    return values


def rank_offers(
    offers: Sequence[OfferLosses],
    rates: CapitalisationRates,
    quantity: int,
    rating_kva: float,
) -> list[RankedOffer]:
    """Rank offers by total owning cost, lowest first, with deterministic ties.

    Parameters
    ----------
    offers : sequence of OfferLosses
        The offers to compare (prices and losses finite and >= 0).
    rates : CapitalisationRates
        A, B, C [currency/kW].
    quantity : int
        Number of units in the lot, >= 1.
    rating_kva : float
        Rated apparent power of the units [kVA], > 0 (for the efficiencies).

    Returns
    -------
    list of RankedOffer
        Rank 1 first; an empty list for no offers.

    Notes
    -----
    Sort keys, most significant first: TOC per unit, unit price, bidder
    (casefolded), offer_id; then, only to settle offers that share an id, the
    bidder as typed and the three losses. TOCs are compared as computed
    (exact float equality is a tie). The order therefore never depends on the
    order of ``offers``. Ranks are positions 1..n, not dense ranks.
    toc_total = quantity * toc_per_unit. Efficiencies at 25, 50, 75 and 100 %
    loading, unity power factor, use P0 and Pk only: cooling runs over part of
    the load range and is costed in TOC, not in the efficiency table.

    References
    ----------
    Loss-evaluation method of IEEE C57.120 and the US rural-utility bulletins
    (lowest evaluated cost wins); tie rules are this product's own.
    """
    lot_size = whole_number("quantity", quantity, low=1)
    rating = finite_scalar("rating_kva", rating_kva, low=0.0, low_open=True)
    if len(offers) == 0:
        return []

    prices = _offer_column(offers, "unit_price")
    p0 = _offer_column(offers, "no_load_loss_w")
    pk = _offer_column(offers, "load_loss_w")
    paux = _offer_column(offers, "aux_loss_w")
    offer_ids = np.array([offer.offer_id for offer in offers], dtype=np.int64)
    bidders = np.array([offer.bidder for offer in offers], dtype=str)
    bidder_keys = np.array([offer.bidder.casefold() for offer in offers], dtype=str)

    costs = total_owning_cost(prices, p0, pk, paux, rates)
    toc = np.asarray(costs.toc_per_unit)
    loadings = np.array(EFFICIENCY_LOADINGS_PCT, dtype=float) / 100.0
    eta = np.asarray(efficiency(loadings[:, None], rating, p0, pk))  # (loadings, offers)

    # np.lexsort sorts by the last key first.
    order = np.lexsort((paux, pk, p0, bidders, offer_ids, bidder_keys, prices, toc))
    return [
        RankedOffer(
            rank=position,
            offer_id=int(offer_ids[j]),
            bidder=offers[j].bidder,
            unit_price=float(prices[j]),
            capitalised_no_load=float(costs.capitalised_no_load[j]),
            capitalised_load=float(costs.capitalised_load[j]),
            capitalised_aux=float(costs.capitalised_aux[j]),
            toc_per_unit=float(toc[j]),
            toc_total=float(lot_size * toc[j]),
            efficiency_pct={
                pct: float(100.0 * eta[row, j]) for row, pct in enumerate(EFFICIENCY_LOADINGS_PCT)
            },
        )
        for position, j in enumerate(order.tolist(), start=1)
    ]
