"""Transformer efficiency from guaranteed losses.

Losses in W, rating in kVA (converted to VA/W by 1000), loading in pu of the
rating. All functions are element-wise and broadcast their inputs, so one call
can evaluate several loadings against an array of offers
(``load_pu[:, None]`` against losses of shape ``(n_offers,)``). NaN in an input
gives NaN in the matching element; negative or infinite values raise.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from domain._checks import as_output, check_array_range, float_array
from domain.errors import InvalidInput

__all__ = ["efficiency", "loading_of_maximum_efficiency", "peak_efficiency_index"]


def efficiency(
    load_pu: Any,
    rating_kva: Any,
    no_load_loss_w: Any,
    load_loss_w: Any,
    power_factor: Any = 1.0,
    aux_loss_w: Any = 0.0,
) -> float | np.ndarray:
    """Efficiency of a transformer at a given loading and power factor.

    Parameters
    ----------
    load_pu : float or array_like
        Loading k [pu of rated apparent power, output side], >= 0.
    rating_kva : float or array_like
        Rated apparent power Sr [kVA], > 0.
    no_load_loss_w : float or array_like
        No-load loss P0 [W], >= 0.
    load_loss_w : float or array_like
        Load loss at rated current Pk [W], >= 0.
    power_factor : float or array_like, optional
        Load power factor pf [0..1]. Default 1.
    aux_loss_w : float or array_like, optional
        Auxiliary (cooling) loss running at this loading Paux [W], >= 0.
        Default 0.

    Returns
    -------
    float or numpy.ndarray
        Efficiency eta [fraction, 0..1]; 0 at zero loading. Broadcast shape of
        the inputs; a Python float when all inputs are scalars.

    Notes
    -----
    eta = k * S * pf / (k * S * pf + P0 + Paux + k**2 * Pk), S = 1000 * Sr [W].
    Output power over output power plus losses.

    References
    ----------
    Textbook definition of efficiency (output / input); IEC 60076-1 defines
    load loss at rated current, so the load loss scales with k**2.
    """
    k = float_array("load_pu", load_pu)
    sr = float_array("rating_kva", rating_kva)
    p0 = float_array("no_load_loss_w", no_load_loss_w)
    pk = float_array("load_loss_w", load_loss_w)
    pf = float_array("power_factor", power_factor)
    paux = float_array("aux_loss_w", aux_loss_w)
    check_array_range("load_pu", k, low=0.0)
    check_array_range("rating_kva", sr, low=0.0, low_open=True)
    check_array_range("no_load_loss_w", p0, low=0.0)
    check_array_range("load_loss_w", pk, low=0.0)
    check_array_range("power_factor", pf, low=0.0, high=1.0)
    check_array_range("aux_loss_w", paux, low=0.0)

    output_w = k * (sr * 1000.0) * pf
    input_w = output_w + p0 + paux + k * k * pk
    with np.errstate(divide="ignore", invalid="ignore"):
        eta = output_w / input_w
    # No output and no loss (k = 0 on a lossless unit): call it 0, as at any k = 0.
    return as_output(np.where((output_w == 0.0) & (input_w == 0.0), 0.0, eta))


def loading_of_maximum_efficiency(no_load_loss_w: Any, load_loss_w: Any) -> float | np.ndarray:
    """Loading at which efficiency is highest: where load loss equals no-load loss.

    Parameters
    ----------
    no_load_loss_w : float or array_like
        No-load loss P0 [W], >= 0.
    load_loss_w : float or array_like
        Load loss at rated current Pk [W], > 0.

    Returns
    -------
    float or numpy.ndarray
        k* [pu of rating]. NaN propagates.

    Notes
    -----
    k* = sqrt(P0 / Pk), from d(eta)/dk = 0 for any fixed power factor. With an
    auxiliary loss that runs at all loadings, use P0 + Paux in place of P0.

    References
    ----------
    Textbook result (maximum efficiency when variable loss equals fixed loss).
    """
    p0 = float_array("no_load_loss_w", no_load_loss_w)
    pk = float_array("load_loss_w", load_loss_w)
    check_array_range("no_load_loss_w", p0, low=0.0)
    check_array_range("load_loss_w", pk, low=0.0)
    if np.any(pk == 0.0):
        raise InvalidInput("load_loss_w", "must be > 0 (efficiency has no maximum otherwise)")
    return as_output(np.sqrt(p0 / pk))


def peak_efficiency_index(
    rating_kva: Any,
    no_load_loss_w: Any,
    load_loss_w: Any,
    cooling_power_no_load_w: Any = 0.0,
) -> float | np.ndarray:
    """Peak Efficiency Index (PEI) of a transformer.

    Parameters
    ----------
    rating_kva : float or array_like
        Rated apparent power Sr [kVA], > 0.
    no_load_loss_w : float or array_like
        No-load loss P0 [W], >= 0.
    load_loss_w : float or array_like
        Load loss at rated current Pk [W], >= 0.
    cooling_power_no_load_w : float or array_like, optional
        Power of the cooling equipment at no load Pc0 [W], >= 0. Default 0.

    Returns
    -------
    float or numpy.ndarray
        PEI [fraction]. NaN propagates.

    Notes
    -----
    PEI = 1 - 2 * (P0 + Pc0) / (S * sqrt((P0 + Pc0) / Pk)), S = 1000 * Sr [W],
    evaluated in the equal form 1 - 2 * sqrt((P0 + Pc0) * Pk) / S, which needs
    no special case when P0 + Pc0 = 0. PEI is the highest value over k of
    1 - losses(k) / (k * S): losses over *transmitted* power. Efficiency as
    defined in ``efficiency`` divides by output plus losses instead, so at
    unity power factor and Pc0 = 0 the two are related exactly by
    efficiency(k*) = 1 / (2 - PEI), and PEI <= efficiency(k*) with a gap of
    at most (1 - PEI)**2.

    References
    ----------
    IEC 60076-20 and Commission Regulation (EU) No 548/2014 (formula from
    memory; check against the published text).
    """
    sr = float_array("rating_kva", rating_kva)
    p0 = float_array("no_load_loss_w", no_load_loss_w)
    pk = float_array("load_loss_w", load_loss_w)
    pc0 = float_array("cooling_power_no_load_w", cooling_power_no_load_w)
    check_array_range("rating_kva", sr, low=0.0, low_open=True)
    check_array_range("no_load_loss_w", p0, low=0.0)
    check_array_range("load_loss_w", pk, low=0.0)
    check_array_range("cooling_power_no_load_w", pc0, low=0.0)
    return as_output(1.0 - 2.0 * np.sqrt((p0 + pc0) * pk) / (sr * 1000.0))
