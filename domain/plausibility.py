"""Plausibility warnings for an offer: things that look wrong, never reasons to reject.

The bands are common practice for distribution transformers, with no single source; they
only prompt a second look. Each warning has a stable ``code`` (for programs and filters),
the ``field`` it concerns (the offer field as the API names it) and a ``message`` in plain
words with the value that would be usual.

Codes:

- ``loss_zero``: a guaranteed loss of 0 W;
- ``kw_typed_as_w``: a loss about 1000 times too small (kilowatts typed into a watt field);
- ``w_typed_as_mw``: a loss about 1000 times too large;
- ``loss_far_below`` / ``loss_far_above``: a loss far outside the usual share of the rating;
- ``no_load_above_load``: no-load loss above load loss;
- ``impedance_unusual``: impedance outside the usual 4 to 6 %;
- ``impedance_below_minimum``: impedance below the usual minimum for the rating;
- ``efficiency_implausible``: an efficiency at half load no unit of this size reaches;
- ``price_far_from_median``: a price far from the median of the lot's offers.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from domain.efficiency import efficiency

# Usual shares of the rating for distribution units of 25 to 2500 kVA [fraction].
NO_LOAD_SHARE = (0.001, 0.004)
LOAD_SHARE = (0.008, 0.018)
# Far outside: a factor of this beyond the usual band.
FAR = 4.0
USUAL_IMPEDANCE_PCT = (4.0, 6.0)
# Minimum impedance by rating, IEC 60076-5 (from memory; rule iec-60076-5-minimum-impedance):
# (up to kVA, minimum %).
IEC_60076_5_MIN_IMPEDANCE = ((630, 4.0), (1250, 5.0), (2500, 6.0), (6300, 7.0))
MAX_PLAUSIBLE_EFFICIENCY_50_PCT = 99.85
# A price below half or above twice the median of the lot's offers is worth a second look;
# the median needs at least this many offers to mean anything (common practice, no source).
PRICE_FACTOR = 2.0
MIN_OFFERS_FOR_MEDIAN = 3


@dataclass(frozen=True)
class PlausibilityWarning:
    field: str
    message: str
    code: str = ""


def _distribution(rating_kva: float) -> bool:
    return 25 <= rating_kva <= 2500


def _w(value_w: float) -> str:
    """A loss in the message: small values keep their digits (0.43 W stays 0.43 W)."""
    return f"{value_w:,.0f}" if abs(value_w) >= 100 else f"{value_w:.4g}"


def _loss_warnings(field: str, label: str, value_w: float, rating_kva: float,
                   band: tuple[float, float]) -> list[PlausibilityWarning]:
    rated_w = rating_kva * 1000.0
    low_w, high_w = band[0] * rated_w, band[1] * rated_w
    usual = f"usual for {rating_kva:g} kVA: about {low_w:,.0f} to {high_w:,.0f} W"
    if value_w <= 0:
        return [PlausibilityWarning(field, f"{label} is zero; {usual}.", "loss_zero")]
    if value_w < low_w / FAR:
        if low_w / FAR <= value_w * 1000 <= high_w * FAR:
            return [PlausibilityWarning(field, f"{label} {_w(value_w)} W looks like kW typed as W "
                                               f"({value_w * 1000:,.0f} W?); {usual}.", "kw_typed_as_w")]
        return [PlausibilityWarning(field, f"{label} {_w(value_w)} W is far below the usual share of the rating; "
                                           f"{usual}.", "loss_far_below")]
    if value_w > high_w * FAR:
        if low_w / FAR <= value_w / 1000 <= high_w:
            return [PlausibilityWarning(field, f"{label} {_w(value_w)} W looks 1000 times too large (W typed as mW?); "
                                               f"{usual}.", "w_typed_as_mw")]
        return [PlausibilityWarning(field, f"{label} {_w(value_w)} W is far above the usual share of the rating; "
                                           f"{usual}.", "loss_far_above")]
    return []


def offer_warnings(rating_kva: float, no_load_loss_w: float, load_loss_w: float,
                   impedance_pct: float | None) -> list[PlausibilityWarning]:
    """What looks wrong in an offer's technical figures, each with the value that would be usual.

    Parameters
    ----------
    rating_kva : float
        Rated power of the lot [kVA].
    no_load_loss_w, load_loss_w : float
        Guaranteed losses [W].
    impedance_pct : float or None
        Declared short-circuit impedance [%].

    Returns
    -------
    list of PlausibilityWarning
        Empty when nothing looks unusual. Loss shares are judged for distribution units
        (25 to 2500 kVA) only; the minimum impedance for every rating up to 6300 kVA.

    References
    ----------
    Common practice, no single source; minimum impedance by rating after IEC 60076-5
    (from memory).
    """
    warnings: list[PlausibilityWarning] = []
    if _distribution(rating_kva):
        warnings += _loss_warnings("no_load_loss_w", "No-load loss", no_load_loss_w, rating_kva, NO_LOAD_SHARE)
        warnings += _loss_warnings("load_loss_w", "Load loss", load_loss_w, rating_kva, LOAD_SHARE)
        if no_load_loss_w > load_loss_w > 0:
            warnings.append(PlausibilityWarning(
                "no_load_loss_w", f"No-load loss {_w(no_load_loss_w)} W is above the load loss "
                f"{_w(load_loss_w)} W, which is unusual for a distribution unit.", "no_load_above_load"))
        if impedance_pct is not None and not USUAL_IMPEDANCE_PCT[0] <= impedance_pct <= USUAL_IMPEDANCE_PCT[1]:
            warnings.append(PlausibilityWarning(
                "impedance_pct", f"Impedance {impedance_pct:g} % is outside the usual 4 to 6 % for distribution "
                "units.", "impedance_unusual"))
        if no_load_loss_w > 0 and load_loss_w > 0:
            eta = 100 * efficiency(0.5, rating_kva, no_load_loss_w, load_loss_w)
            if eta > MAX_PLAUSIBLE_EFFICIENCY_50_PCT:
                warnings.append(PlausibilityWarning(
                    "load_loss_w", f"Efficiency at half load would be {eta:.3f} %, higher than units of this "
                    f"size usually reach (about {MAX_PLAUSIBLE_EFFICIENCY_50_PCT} % at most); check the losses.",
                    "efficiency_implausible"))
    if impedance_pct is not None:
        for up_to_kva, minimum in IEC_60076_5_MIN_IMPEDANCE:
            if rating_kva <= up_to_kva:
                if impedance_pct < minimum:
                    warnings.append(PlausibilityWarning(
                        "impedance_pct", f"Impedance {impedance_pct:g} % is below the {minimum:g} % minimum for "
                        f"units up to {up_to_kva:,} kVA (IEC 60076-5, from memory).", "impedance_below_minimum"))
                break
    return warnings


def price_warnings(unit_prices: Sequence[float], currency: str = "") -> list[list[PlausibilityWarning]]:
    """For each offer of a lot, a warning when its price is far from the lot's median price.

    Parameters
    ----------
    unit_prices : sequence of float
        The lot's unit prices in one currency (the tender's) [currency].
    currency : str, optional
        Its code, for the message.

    Returns
    -------
    list of list of PlausibilityWarning
        One list per price, in the order given; all empty with fewer than
        ``MIN_OFFERS_FOR_MEDIAN`` prices or a median of 0.

    Notes
    -----
    Flags a price p with p < m / PRICE_FACTOR or p > m * PRICE_FACTOR, m the median
    (numpy.median, the mean of the middle two for an even count). A price typed with a digit
    too many or too few lands far outside; a real outlier deserves a question to the bidder.

    References
    ----------
    Common practice, no source.
    """
    prices = np.asarray(unit_prices, dtype=float)
    out: list[list[PlausibilityWarning]] = [[] for _ in range(prices.size)]
    if prices.size < MIN_OFFERS_FOR_MEDIAN:
        return out
    median = float(np.median(prices))
    if not median > 0:
        return out
    unit = f" {currency}" if currency else ""
    for index in np.flatnonzero((prices < median / PRICE_FACTOR) | (prices > median * PRICE_FACTOR)).tolist():
        price = float(prices[index])
        side = "below half" if price < median else "above twice"
        out[index].append(PlausibilityWarning(
            "unit_price", f"Unit price {price:,.0f}{unit} is {side} the median of the lot's offers "
            f"({median:,.0f}{unit}); check the figure.", "price_far_from_median"))
    return out


__all__ = ["PlausibilityWarning", "offer_warnings", "price_warnings"]
