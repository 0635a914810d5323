"""Factory (routine) test results against the guarantees: verdicts by standard, and loss penalties.

After award, the test certificate of each unit gives measured no-load loss, load loss
(at the reference temperature, see ``domain.circuit.correct_load_loss_to_reference``),
short-circuit impedance and no-load current. This module checks them against the
guaranteed or declared values with the tolerances of IEC 60076-1 or IEEE C57.12.00 and
prices the excess losses with the tender's capitalisation rates (nothing for a unit that is
rejected and sent back).

Losses in W, impedance and no-load current in percent (of rated voltage and rated
current), rates in currency per kW. The verdict functions take one unit; the penalty
and deviation summaries are vectorised over units.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np

from domain._checks import as_output, check_array_range, finite_scalar, float_array
from domain.errors import InvalidInput
from domain.limits import impedance_tolerance_pct

__all__ = [
    "Deviations",
    "IEC_60076_1_SOURCE",
    "IEEE_C57_12_00_SOURCE",
    "Penalty",
    "TestFinding",
    "iec_60076_1_verdict",
    "ieee_c57_12_00_verdict",
    "loss_penalty",
    "summarise_deviations",
    "within_tolerance",
]

IEC_60076_1_SOURCE = "IEC 60076-1 Table 1 (1993 + A1 1999 read; 2011 edition from memory)"
IEEE_C57_12_00_SOURCE = "IEEE C57.12.00, loss tolerances (from memory)"

# IEC 60076-1 Table 1 tolerances [percent of the guaranteed or declared value].
IEC_TOTAL_LOSS_TOLERANCE_PCT = 10.0
IEC_COMPONENT_LOSS_TOLERANCE_PCT = 15.0
IEC_NO_LOAD_CURRENT_TOLERANCE_PCT = 30.0  # from memory
# IEEE C57.12.00, one unit [percent], from memory.
IEEE_NO_LOAD_LOSS_TOLERANCE_PCT = 10.0
IEEE_TOTAL_LOSS_TOLERANCE_PCT = 6.0

# A value that equals its limit passes: allow for rounding in limit = g * (1 + tol).
_EDGE_RTOL = 1e-9


@dataclass(frozen=True)
class TestFinding:
    """One tolerance rule checked against one test certificate.

    Attributes
    ----------
    rule : str
        The rule in plain words.
    limit : float
        For one-sided rules the largest value that passes; for the two-sided impedance
        rule the declared value (the band is in ``note``).
    value : float
        The measured value.
    unit : str
        Unit of ``limit`` and ``value`` ("W" or "%").
    passed : bool
        Whether the rule holds.
    source : str
        Standard, clause and status ("from memory" where the text was not read).
    note : str
        Why a rule failed when the reason is not the value itself, or the allowed band.
    """

    __test__ = False  # not a pytest test class, despite the name

    rule: str
    limit: float
    value: float
    unit: str
    passed: bool
    source: str
    note: str = ""


def _at_most(value: float, limit: float) -> bool:
    return value <= limit + _EDGE_RTOL * abs(limit)


def _losses(guaranteed_no_load_w: Any, guaranteed_load_w: Any, measured_no_load_w: Any,
            measured_load_w: Any) -> tuple[float, float, float, float]:
    return (
        finite_scalar("guaranteed_no_load_w", guaranteed_no_load_w, low=0.0, low_open=True),
        finite_scalar("guaranteed_load_w", guaranteed_load_w, low=0.0, low_open=True),
        finite_scalar("measured_no_load_w", measured_no_load_w, low=0.0),
        finite_scalar("measured_load_w", measured_load_w, low=0.0),
    )


def _pair(declared_field: str, declared: Any, measured_field: str, measured: Any) -> tuple[float, float] | None:
    """Both values of an optional declared/measured pair, or None when neither is given."""
    if declared is None and measured is None:
        return None
    if declared is None:
        raise InvalidInput(declared_field, f"is needed when {measured_field} is given")
    if measured is None:
        raise InvalidInput(measured_field, f"is needed when {declared_field} is given")
    return (finite_scalar(declared_field, declared, low=0.0, low_open=True),
            finite_scalar(measured_field, measured, low=0.0))


def iec_60076_1_verdict(
    guaranteed_no_load_w: float,
    guaranteed_load_w: float,
    measured_no_load_w: float,
    measured_load_w: float,
    declared_impedance_pct: float | None = None,
    measured_impedance_pct: float | None = None,
    declared_no_load_current_pct: float | None = None,
    measured_no_load_current_pct: float | None = None,
) -> list[TestFinding]:
    """Findings of one unit's test certificate against the IEC 60076-1 tolerances.

    Parameters
    ----------
    guaranteed_no_load_w, guaranteed_load_w : float
        Guaranteed no-load loss P0 and load loss Pk [W], > 0.
    measured_no_load_w, measured_load_w : float
        Measured P0 and Pk [W], >= 0, the load loss corrected to the reference
        temperature.
    declared_impedance_pct, measured_impedance_pct : float, optional
        Short-circuit impedance on the principal tap [percent]; give both or neither.
    declared_no_load_current_pct, measured_no_load_current_pct : float, optional
        No-load current [percent of rated current]; give both or neither.

    Returns
    -------
    list of TestFinding
        In this order: total losses, no-load loss, load loss, then impedance and
        no-load current when given.

    Notes
    -----
    - Total losses: P0 + Pk <= 1.10 * (guaranteed P0 + Pk).
    - Each component: P <= 1.15 * guaranteed, *provided the total-loss tolerance holds*.
      Modelled so that each finding stands on its own: a component finding passes
      only when the component is within +15 % AND the total is within +10 %. A
      component within +15 % on a unit whose total is over +10 % fails, with a note
      saying that the total is the reason. The unit's verdict is the same either way
      (the total finding fails too); this way no component reads "passed" on a unit
      that fails its loss tolerances.
    - Short-circuit impedance: |measured - declared| <= 7.5 % of the declared value
      when it is 10 % or more, 10 % of it when below 10 % (from memory).
    - No-load current: measured <= 1.30 * declared (from memory).
    A value exactly at its limit passes.

    References
    ----------
    IEC 60076-1, Table 1 (1993 + A1 1999 read; 2011 edition from memory), as in
    docs/references.md R7. Specifications may set tighter rules; these are the
    standard's.
    """
    g0, gk, m0, mk = _losses(guaranteed_no_load_w, guaranteed_load_w, measured_no_load_w, measured_load_w)
    impedance = _pair("declared_impedance_pct", declared_impedance_pct,
                      "measured_impedance_pct", measured_impedance_pct)
    no_load_current = _pair("declared_no_load_current_pct", declared_no_load_current_pct,
                            "measured_no_load_current_pct", measured_no_load_current_pct)

    total_limit = (g0 + gk) * (1.0 + IEC_TOTAL_LOSS_TOLERANCE_PCT / 100.0)
    total_ok = _at_most(m0 + mk, total_limit)
    findings = [TestFinding(
        f"total losses <= guaranteed total + {IEC_TOTAL_LOSS_TOLERANCE_PCT:g} %", total_limit, m0 + mk, "W",
        total_ok, IEC_60076_1_SOURCE,
    )]
    for label, guaranteed, measured in (("no-load loss", g0, m0), ("load loss", gk, mk)):
        limit = guaranteed * (1.0 + IEC_COMPONENT_LOSS_TOLERANCE_PCT / 100.0)
        own_ok = _at_most(measured, limit)
        note = ""
        if own_ok and not total_ok:
            note = (f"within +{IEC_COMPONENT_LOSS_TOLERANCE_PCT:g} % but the total-loss tolerance is exceeded, "
                    "on which the component tolerance depends")
        findings.append(TestFinding(
            f"{label} <= guaranteed + {IEC_COMPONENT_LOSS_TOLERANCE_PCT:g} %, provided the total-loss "
            "tolerance holds",
            limit, measured, "W", own_ok and total_ok, IEC_60076_1_SOURCE, note,
        ))
    if impedance is not None:
        declared, measured = impedance
        tolerance = impedance_tolerance_pct(declared)
        band = declared * tolerance / 100.0
        findings.append(TestFinding(
            f"short-circuit impedance within +-{tolerance:g} % of the declared {declared:g} %",
            declared, measured, "%", _at_most(abs(measured - declared), band),
            f"{IEC_60076_1_SOURCE}; impedance tolerance from memory",
            f"allowed {declared - band:.4g} to {declared + band:.4g} %",
        ))
    if no_load_current is not None:
        declared, measured = no_load_current
        limit = declared * (1.0 + IEC_NO_LOAD_CURRENT_TOLERANCE_PCT / 100.0)
        findings.append(TestFinding(
            f"no-load current <= declared + {IEC_NO_LOAD_CURRENT_TOLERANCE_PCT:g} %", limit, measured, "%",
            _at_most(measured, limit), f"{IEC_60076_1_SOURCE}; no-load current tolerance from memory",
        ))
    return findings


def ieee_c57_12_00_verdict(
    guaranteed_no_load_w: float,
    guaranteed_load_w: float,
    measured_no_load_w: float,
    measured_load_w: float,
) -> list[TestFinding]:
    """Findings of one unit's test certificate against the IEEE C57.12.00 loss tolerances.

    Parameters
    ----------
    guaranteed_no_load_w, guaranteed_load_w : float
        Guaranteed no-load loss and load loss [W], > 0.
    measured_no_load_w, measured_load_w : float
        Measured losses [W], >= 0, the load loss at the reference temperature.

    Returns
    -------
    list of TestFinding
        No-load loss, then total losses.

    Notes
    -----
    For a single unit: no-load loss <= 1.10 * guaranteed, total losses <= 1.06 *
    guaranteed total; there is no separate rule for the load loss. The standard also
    has tolerances for the average of several units of one order, not modelled here.

    References
    ----------
    IEEE C57.12.00, loss tolerance table (from memory, docs/references.md R7).
    """
    g0, gk, m0, mk = _losses(guaranteed_no_load_w, guaranteed_load_w, measured_no_load_w, measured_load_w)
    no_load_limit = g0 * (1.0 + IEEE_NO_LOAD_LOSS_TOLERANCE_PCT / 100.0)
    total_limit = (g0 + gk) * (1.0 + IEEE_TOTAL_LOSS_TOLERANCE_PCT / 100.0)
    source = f"{IEEE_C57_12_00_SOURCE}, single unit"
    return [
        TestFinding(f"no-load loss <= guaranteed + {IEEE_NO_LOAD_LOSS_TOLERANCE_PCT:g} %", no_load_limit, m0, "W",
                    _at_most(m0, no_load_limit), source),
        TestFinding(f"total losses <= guaranteed total + {IEEE_TOTAL_LOSS_TOLERANCE_PCT:g} %", total_limit,
                    m0 + mk, "W", _at_most(m0 + mk, total_limit), source),
    ]


def within_tolerance(findings: Sequence[TestFinding]) -> bool:
    """True when every finding passed.

    Raises ``InvalidInput`` for an empty list: no findings is not a pass.
    """
    if len(findings) == 0:
        raise InvalidInput("findings", "no findings to judge")
    return all(f.passed is True for f in findings)


class Penalty(NamedTuple):
    """Loss penalty [currency]: no-load part, load part and their sum."""

    no_load: float | np.ndarray
    load: float | np.ndarray
    total: float | np.ndarray


def loss_penalty(
    guaranteed_no_load_w: Any,
    guaranteed_load_w: Any,
    measured_no_load_w: Any,
    measured_load_w: Any,
    no_load_rate_per_kw: Any,
    load_rate_per_kw: Any,
    multiplier: Any = 1.0,
    credit_below: bool = False,
    rejected: Any = False,
) -> Penalty:
    """Penalty for measured losses above the guarantees, capitalised at the tender's rates.

    Parameters
    ----------
    guaranteed_no_load_w, guaranteed_load_w : float or array_like
        Guaranteed P0 and Pk [W], >= 0.
    measured_no_load_w, measured_load_w : float or array_like
        Measured P0 and Pk [W], >= 0 (load loss at the reference temperature).
    no_load_rate_per_kw, load_rate_per_kw : float or array_like
        Capitalisation rates A and B [currency per kW], >= 0.
    multiplier : float or array_like, optional
        Factor on the capitalised excess set by the specification, >= 0. Default 1.
    credit_below : bool, optional
        When True, losses below the guarantee give a negative amount (a credit); when
        False (default, the usual rule) they give 0.
    rejected : bool or array_like of bool, optional
        Whether the unit is rejected under the contract terms (default False). A rejected
        unit is sent back, not accepted with a charge: every part of its penalty is 0.

    Returns
    -------
    Penalty
        ``no_load``, ``load``, ``total`` [currency]; broadcast over the inputs (one
        element per unit for arrays of units).

    Notes
    -----
    no_load = A * multiplier * (P0 measured - P0 guaranteed) / 1000, and the same with
    B for the load loss; without credit each part is floored at 0 separately, so a
    saving on one loss does not offset an excess on the other. A rejected unit's parts
    are 0 whatever its losses. NaN propagates, except for a rejected unit.

    References
    ----------
    Common specification practice (docs/references.md R7); the rates are those of the
    tender's total-owning-cost evaluation (section 2).
    """
    g0 = float_array("guaranteed_no_load_w", guaranteed_no_load_w)
    gk = float_array("guaranteed_load_w", guaranteed_load_w)
    m0 = float_array("measured_no_load_w", measured_no_load_w)
    mk = float_array("measured_load_w", measured_load_w)
    a = float_array("no_load_rate_per_kw", no_load_rate_per_kw)
    b = float_array("load_rate_per_kw", load_rate_per_kw)
    factor = float_array("multiplier", multiplier)
    for name, array in (("guaranteed_no_load_w", g0), ("guaranteed_load_w", gk), ("measured_no_load_w", m0),
                        ("measured_load_w", mk), ("no_load_rate_per_kw", a), ("load_rate_per_kw", b),
                        ("multiplier", factor)):
        check_array_range(name, array, low=0.0)
    if not isinstance(credit_below, (bool, np.bool_)):
        raise InvalidInput("credit_below", f"must be True or False, got {credit_below!r}")
    sent_back = np.asarray(rejected)
    if sent_back.dtype != np.bool_:
        raise InvalidInput("rejected", f"must be True or False for each unit, got {rejected!r}")

    excess_no_load_kw = (m0 - g0) / 1000.0
    excess_load_kw = (mk - gk) / 1000.0
    if not credit_below:
        excess_no_load_kw = np.maximum(excess_no_load_kw, 0.0)
        excess_load_kw = np.maximum(excess_load_kw, 0.0)
    no_load = excess_no_load_kw * a * factor
    load = excess_load_kw * b * factor
    try:
        no_load, load = np.where(sent_back, 0.0, no_load), np.where(sent_back, 0.0, load)
    except ValueError:
        raise InvalidInput("rejected", f"shape {sent_back.shape} does not match the losses' {no_load.shape}") from None
    shape = np.broadcast_shapes(no_load.shape, load.shape)
    no_load, load = np.broadcast_to(no_load, shape), np.broadcast_to(load, shape)
    # + 0.0 turns a -0.0 (no excess times a rate) into 0.0 for display.
    return Penalty(as_output(no_load + 0.0), as_output(load + 0.0), as_output(no_load + load + 0.0))


class Deviations(NamedTuple):
    """Deviation of measured from guaranteed losses over a set of units [percent]."""

    mean_pct: float | np.ndarray
    worst_pct: float | np.ndarray


def summarise_deviations(guaranteed: Any, measured: Any) -> Deviations:
    """Mean and worst deviation of measured losses from their guarantees over units.

    Parameters
    ----------
    guaranteed : float or array_like
        Guaranteed loss [W], > 0: one value for every unit, or one per unit.
    measured : float or array_like
        Measured loss [W], >= 0, units along the last axis (shape ``(..., n_units)``;
        for example ``(2, n)`` for no-load and load losses of n units).

    Returns
    -------
    Deviations
        ``mean_pct`` (mean of the units' deviations) and ``worst_pct`` (the largest,
        i.e. the unit furthest above its guarantee; negative when every unit is below)
        [percent], with the last axis reduced.

    Notes
    -----
    Deviation of unit i: d_i = 100 * (measured_i / guaranteed_i - 1). When all units
    share one guarantee the mean deviation is also the deviation of the mean loss.
    A reduction over units: NaN and infinity are rejected, not propagated.

    References
    ----------
    Common practice in reviewing a batch of test certificates.
    """
    g = float_array("guaranteed", guaranteed)
    m = float_array("measured", measured)
    for name, array in (("guaranteed", g), ("measured", m)):
        if not np.all(np.isfinite(array)):
            raise InvalidInput(name, "must be finite numbers (a summary over units does not skip missing values)")
    check_array_range("guaranteed", g, low=0.0, low_open=True)
    check_array_range("measured", m, low=0.0)
    try:
        g, m = np.broadcast_arrays(g, m)
    except ValueError:
        raise InvalidInput("measured", f"shape {m.shape} does not match guaranteed {g.shape}") from None
    if g.ndim == 0:
        g, m = g.reshape(1), m.reshape(1)
    if g.shape[-1] == 0:
        raise InvalidInput("measured", "needs at least one unit")
    deviation = 100.0 * (m / g - 1.0)
    return Deviations(as_output(deviation.mean(axis=-1)), as_output(deviation.max(axis=-1)))
