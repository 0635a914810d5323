"""Plausibility warnings for an offer: things that look wrong, never reasons to reject.

The bands are common practice for distribution transformers, with no single source
(REFERENCE.md section 8); they only prompt a second look.
"""

from __future__ import annotations

from dataclasses import dataclass

from domain.efficiency import efficiency

# Usual shares of the rating for distribution units of 25 to 2500 kVA [fraction].
NO_LOAD_SHARE = (0.001, 0.004)
LOAD_SHARE = (0.008, 0.018)
# Far outside: a factor of this beyond the usual band.
FAR = 4.0
USUAL_IMPEDANCE_PCT = (4.0, 6.0)
# Minimum impedance by rating, IEC 60076-5 (from memory): (up to kVA, minimum %).
IEC_60076_5_MIN_IMPEDANCE = ((630, 4.0), (1250, 5.0), (2500, 6.0), (6300, 7.0))
MAX_PLAUSIBLE_EFFICIENCY_50_PCT = 99.85


@dataclass(frozen=True)
class PlausibilityWarning:
    field: str
    message: str


def _distribution(rating_kva: float) -> bool:
    return 25 <= rating_kva <= 2500


def _loss_warnings(field: str, label: str, value_w: float, rating_kva: float, band: tuple[float, float]) -> list[PlausibilityWarning]:
    rated_w = rating_kva * 1000.0
    low_w, high_w = band[0] * rated_w, band[1] * rated_w
    usual = f"usual for {rating_kva:g} kVA: about {low_w:,.0f} to {high_w:,.0f} W"
    if value_w <= 0:
        return [PlausibilityWarning(field, f"{label} is zero; {usual}.")]
    if value_w < low_w / FAR:
        if low_w / FAR <= value_w * 1000 <= high_w * FAR:
            return [PlausibilityWarning(field, f"{label} {value_w:g} W looks like kW typed as W ({value_w * 1000:,.0f} W?); {usual}.")]
        return [PlausibilityWarning(field, f"{label} {value_w:,.0f} W is far below the usual share of the rating; {usual}.")]
    if value_w > high_w * FAR:
        if low_w / FAR <= value_w / 1000 <= high_w:
            return [PlausibilityWarning(field, f"{label} {value_w:,.0f} W looks 1000 times too large (W typed as mW?); {usual}.")]
        return [PlausibilityWarning(field, f"{label} {value_w:,.0f} W is far above the usual share of the rating; {usual}.")]
    return []


def offer_warnings(rating_kva: float, no_load_loss_w: float, load_loss_w: float,
                   impedance_pct: float | None) -> list[PlausibilityWarning]:
    """What looks wrong in an offer, each with the value that would be usual.

    Parameters
    ----------
    rating_kva : float
        Rated power of the lot [kVA].
    no_load_loss_w, load_loss_w : float
        Guaranteed losses [W].
    impedance_pct : float or None
        Declared short-circuit impedance [%].

    References
    ----------
    Common practice, no single source (REFERENCE.md section 8); minimum impedance by
    rating after IEC 60076-5 (from memory).
    """
    warnings: list[PlausibilityWarning] = []
    if _distribution(rating_kva):
        warnings += _loss_warnings("no_load_loss_w", "No-load loss", no_load_loss_w, rating_kva, NO_LOAD_SHARE)
        warnings += _loss_warnings("load_loss_w", "Load loss", load_loss_w, rating_kva, LOAD_SHARE)
        if no_load_loss_w > load_loss_w > 0:
            warnings.append(PlausibilityWarning("no_load_loss_w", f"No-load loss {no_load_loss_w:,.0f} W is above the load loss "
                                    f"{load_loss_w:,.0f} W, which is unusual for a distribution unit."))
        if impedance_pct is not None and not USUAL_IMPEDANCE_PCT[0] <= impedance_pct <= USUAL_IMPEDANCE_PCT[1]:
            warnings.append(PlausibilityWarning("impedance_pct", f"Impedance {impedance_pct:g} % is outside the usual 4 to 6 % "
                                    "for distribution units."))
        if no_load_loss_w > 0 and load_loss_w > 0:
            eta = 100 * efficiency(0.5, rating_kva, no_load_loss_w, load_loss_w)
            if eta > MAX_PLAUSIBLE_EFFICIENCY_50_PCT:
                warnings.append(PlausibilityWarning("load_loss_w", f"Efficiency at half load would be {eta:.3f} %, higher than "
                                        f"units of this size usually reach (about {MAX_PLAUSIBLE_EFFICIENCY_50_PCT} % "
                                        "at most); check the losses."))
    if impedance_pct is not None:
        for up_to_kva, minimum in IEC_60076_5_MIN_IMPEDANCE:
            if rating_kva <= up_to_kva:
                if impedance_pct < minimum:
                    warnings.append(PlausibilityWarning("impedance_pct", f"Impedance {impedance_pct:g} % is below the {minimum:g} % "
                                            f"minimum for units up to {up_to_kva:,} kVA (IEC 60076-5, from memory)."))
                break
    return warnings
