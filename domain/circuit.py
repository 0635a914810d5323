"""Transformer equivalent circuit from the open- and short-circuit tests, and its exact solution.

Conventions kept by every function here:

- three-phase units: the tests give line-to-line voltage, line current and the total
  power of the three phases; the circuit is one phase of the star equivalent
  (V_ph = V_LL / sqrt(3), I_ph = I_line, P_ph = P / 3), whatever the winding
  connection. Ohms are star-equivalent ohms per phase. Single-phase units: as measured;
  ``phases`` is 1 or 3;
- impedances are referred from one side to the other by the square of the rated
  voltage ratio (the turns ratio a = V_hv / V_lv for a two-winding unit);
- the shunt branch is a resistance R0 in parallel with a reactance X0 (conductance
  G = 1 / R0, susceptance B = 1 / X0); X0 = ``math.inf`` means no magnetising current;
- element-wise functions broadcast their inputs and return a Python ``float`` for
  scalar inputs, else a float64 array (``domain._checks.as_output``); NaN passes
  through to the matching element, out-of-domain values raise ``InvalidInput``.

References
----------
The open- and short-circuit test method and the T-equivalent circuit are the standard
textbook treatment of the two-winding transformer (e.g. A. E. Fitzgerald, C. Kingsley,
S. D. Umans, *Electric Machinery*, chapter 2). Temperature correction of the load loss:
IEC 60076-1 and IEEE C57.12.90 (formula from memory, docs/references.md R7).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal, NamedTuple

import numpy as np

from domain._checks import as_output, check_array_range, finite_scalar, float_array, whole_number
from domain.errors import InvalidInput

__all__ = [
    "CircuitSolution",
    "EquivalentCircuit",
    "SeriesBranch",
    "SeriesSplit",
    "ShuntBranch",
    "TEMPERATURE_CONSTANT_C",
    "base_impedance_ohm",
    "circuit_from_tests",
    "correct_load_loss_to_reference",
    "impedance_percent",
    "rated_current_a",
    "refer_impedance",
    "scale_to_current",
    "series_branch_from_short_circuit",
    "shunt_branch_from_open_circuit",
    "solve_t_circuit",
    "split_series",
]

SQRT3 = math.sqrt(3.0)

# Relative tolerance for "power equals apparent power": test readings computed from
# percentages (i0 equal to the loss current, as in some library types) land within
# rounding of V*I, and must give B = 0 rather than a tiny susceptance or an error.
UNITY_POWER_FACTOR_RTOL = 1e-9

# Temperature constant C [deg C] of the resistance-temperature relation R ~ (C + t),
# by standard and conductor. IEC 60076-1: copper 235, aluminium 225; IEEE C57.12.90:
# copper 234.5, aluminium 225 (all from memory; docs/references.md R7 lists IEC copper
# and aluminium and IEEE copper).
TEMPERATURE_CONSTANT_C: dict[tuple[str, str], float] = {
    ("iec", "copper"): 235.0,
    ("iec", "aluminium"): 225.0,
    ("ieee", "copper"): 234.5,
    ("ieee", "aluminium"): 225.0,
}

Side = Literal["hv", "lv"]


class ShuntBranch(NamedTuple):
    """Shunt (magnetising) branch per phase: R0 in parallel with X0 [ohm].

    ``x0_ohm`` is ``math.inf`` when the no-load current is all loss current.
    """

    r0_ohm: float | np.ndarray
    x0_ohm: float | np.ndarray


class SeriesBranch(NamedTuple):
    """Series (leakage) branch per phase: Req + jXeq and its magnitude |Zeq| [ohm]."""

    req_ohm: float | np.ndarray
    xeq_ohm: float | np.ndarray
    zeq_ohm: float | np.ndarray


class SeriesSplit(NamedTuple):
    """The series branch split between the windings, all on one side [ohm per phase].

    Winding 1 is the supply side of the T circuit, winding 2 the load side.
    """

    r1_ohm: float | np.ndarray
    x1_ohm: float | np.ndarray
    r2_ohm: float | np.ndarray
    x2_ohm: float | np.ndarray


@dataclass(frozen=True)
class CircuitSolution:
    """Exact solution of the T-equivalent circuit at one or many operating points.

    Voltages are line-to-line for three-phase units (phase voltage for single-phase),
    currents are line currents, all referred to the circuit's side [V, A]. Powers and
    losses are totals over the phases [W, var]. Every field has the broadcast shape of
    the inputs (a Python float when all were scalars).

    Attributes
    ----------
    input_voltage_v, input_current_a : supply terminals |V1|, |I1|.
    output_voltage_v, output_current_a : load terminals |V2'|, |I2'|.
    input_power_w, output_power_w : active power in and out.
    input_reactive_power_var, output_reactive_power_var : reactive power in and out
        (positive: absorbed by the transformer at the input, delivered to an inductive
        load at the output).
    primary_copper_loss_w : |I1|^2 R1 summed over the phases.
    secondary_copper_loss_w : |I2'|^2 R2' summed over the phases.
    core_loss_w : |Vm|^2 / R0 summed over the phases (Vm the shunt-branch voltage).
    losses_w : the three losses added.
    efficiency : output over input power [fraction]; 0 when there is no output.
    regulation_pct : (|V2 no-load| - |V2|) / |V2| * 100, with V2 no-load the output
        voltage once the load is removed and the same input voltage kept.
    """

    input_voltage_v: float | np.ndarray
    input_current_a: float | np.ndarray
    output_voltage_v: float | np.ndarray
    output_current_a: float | np.ndarray
    input_power_w: float | np.ndarray
    output_power_w: float | np.ndarray
    input_reactive_power_var: float | np.ndarray
    output_reactive_power_var: float | np.ndarray
    primary_copper_loss_w: float | np.ndarray
    secondary_copper_loss_w: float | np.ndarray
    core_loss_w: float | np.ndarray
    losses_w: float | np.ndarray
    efficiency: float | np.ndarray
    regulation_pct: float | np.ndarray


def _phases(phases: Any) -> int:
    count = whole_number("phases", phases, low=1, high=3)
    if count not in (1, 3):
        raise InvalidInput("phases", f"must be 1 or 3, got {count}")
    return count


def _phase_voltage(voltage: np.ndarray, phases: int) -> np.ndarray:
    return voltage / SQRT3 if phases == 3 else voltage


def _positive(field: str, value: Any) -> np.ndarray:
    array = float_array(field, value)
    check_array_range(field, array, low=0.0, low_open=True)
    return array


def _non_negative(field: str, value: Any) -> np.ndarray:
    array = float_array(field, value)
    check_array_range(field, array, low=0.0)
    return array


def _impedance(field: str, value: Any, *, positive: bool = False) -> np.ndarray:
    """An impedance in ohm: >= 0 (or > 0), +infinity allowed (an open branch), NaN let through."""
    array = float_array(field, value)
    if np.any(array == -np.inf):
        raise InvalidInput(field, "must not be -infinity")
    bad = array <= 0.0 if positive else array < 0.0
    if np.any(bad):
        relation = ">" if positive else ">="
        raise InvalidInput(field, f"must be {relation} 0 (infinity allowed), got {array[bad].flat[0]!r}")
    return array


def _measured_per_phase(voltage_v: Any, current_a: Any, power_w: Any, phases: Any):
    """Validated readings converted to one phase of the star equivalent."""
    count = _phases(phases)
    v = _positive("voltage_v", voltage_v)
    i = _positive("current_a", current_a)
    p = _positive("power_w", power_w)
    v_ph = _phase_voltage(v, count)
    p_ph = p / count
    apparent = v_ph * i
    if np.any(p_ph > apparent * (1.0 + UNITY_POWER_FACTOR_RTOL)):
        shown = "sqrt(3) * V * I" if count == 3 else "V * I"
        raise InvalidInput("power_w", f"exceeds the apparent power {shown}: a power factor above 1 "
                                      "means a reading or unit error")
    return v_ph, i, p_ph, apparent


def rated_current_a(rating_kva: Any, voltage_v: Any, phases: Any) -> float | np.ndarray:
    """Rated (line) current of a winding.

    Parameters
    ----------
    rating_kva : float or array_like
        Rated power S [kVA], > 0 (three-phase total for three-phase units).
    voltage_v : float or array_like
        Rated voltage of the winding V [V], > 0 (line-to-line for three-phase units).
    phases : int
        1 or 3.

    Returns
    -------
    float or numpy.ndarray
        Rated current [A]: line current for three-phase units.

    Notes
    -----
    I = 1000 * S / (sqrt(3) * V) for three-phase units, I = 1000 * S / V for single-phase.

    References
    ----------
    Definition of rated current (IEC 60076-1, rated quantities); common practice.
    """
    count = _phases(phases)
    s_va = _positive("rating_kva", rating_kva) * 1000.0
    v = _positive("voltage_v", voltage_v)
    return as_output(s_va / (SQRT3 * v) if count == 3 else s_va / v)


def base_impedance_ohm(voltage_v: Any, rating_kva: Any) -> float | np.ndarray:
    """Base (reference) impedance of a winding, per phase.

    Parameters
    ----------
    voltage_v : float or array_like
        Rated voltage V [V], > 0: line-to-line for three-phase units.
    rating_kva : float or array_like
        Rated power S [kVA], > 0: the three-phase total for three-phase units.

    Returns
    -------
    float or numpy.ndarray
        Zbase [ohm per phase].

    Notes
    -----
    Zbase = V**2 / (1000 * S). For a three-phase unit with V line-to-line and S the
    total this is the star-equivalent phase base (V/sqrt(3))**2 / (S/3): the same number.

    References
    ----------
    Per-unit system, common practice.
    """
    v = _positive("voltage_v", voltage_v)
    s_va = _positive("rating_kva", rating_kva) * 1000.0
    return as_output(v * v / s_va)


def shunt_branch_from_open_circuit(voltage_v: Any, current_a: Any, power_w: Any, phases: Any) -> ShuntBranch:
    """Shunt branch R0 || X0 from an open-circuit (no-load) test, referred to the measured side.

    Parameters
    ----------
    voltage_v : float or array_like
        Applied voltage V [V], > 0: line-to-line for three-phase units. The parameters
        hold at this voltage; the test is made at rated voltage.
    current_a : float or array_like
        No-load current I0 [A], > 0: line current for three-phase units.
    power_w : float or array_like
        No-load power P0 [W], > 0: the total of the phases. Must not exceed the apparent
        power (V * I, or sqrt(3) * V * I for three phases) beyond a relative 1e-9.
    phases : int
        1 or 3.

    Returns
    -------
    ShuntBranch
        ``r0_ohm`` and ``x0_ohm`` [ohm per phase, star equivalent for three phases].
        ``x0_ohm`` is ``math.inf`` where the no-load current is all loss current.

    Notes
    -----
    Per phase: G = P_ph / V_ph**2, |Y| = I0 / V_ph, B = sqrt(|Y|**2 - G**2);
    R0 = 1 / G, X0 = 1 / B. When |Y| <= G * (1 + 1e-9) the no-load current is taken
    as all loss current: B = 0 and X0 is infinite (the shunt branch is R0 alone). This
    is the case of data sets that state i0 equal to the loss current.

    References
    ----------
    Standard textbook open-circuit test (docs/references.md R7).
    """
    v_ph, i, p_ph, _ = _measured_per_phase(voltage_v, current_a, power_w, phases)
    g = p_ph / (v_ph * v_ph)
    y = i / v_ph
    all_loss_current = y <= g * (1.0 + UNITY_POWER_FACTOR_RTOL)
    with np.errstate(invalid="ignore"):
        b = np.sqrt(np.where(all_loss_current, 0.0, y * y - g * g))
    x0 = np.divide(1.0, b, out=np.full(np.shape(b), np.inf), where=b > 0.0)
    x0 = np.where(np.isnan(b), np.nan, x0)
    return ShuntBranch(as_output(1.0 / g), as_output(x0))


def series_branch_from_short_circuit(voltage_v: Any, current_a: Any, power_w: Any, phases: Any) -> SeriesBranch:
    """Series branch Req + jXeq from a short-circuit (impedance) test, referred to the measured side.

    Parameters
    ----------
    voltage_v : float or array_like
        Applied voltage Vsc [V], > 0: line-to-line for three-phase units.
    current_a : float or array_like
        Test current Isc [A], > 0: line current for three-phase units.
    power_w : float or array_like
        Input power Psc [W], > 0: the total of the phases; at most the apparent power.
    phases : int
        1 or 3.

    Returns
    -------
    SeriesBranch
        ``req_ohm``, ``xeq_ohm``, ``zeq_ohm`` [ohm per phase, star equivalent].

    Notes
    -----
    Per phase: Req = P_ph / Isc**2, |Zeq| = V_ph / Isc, Xeq = sqrt(|Zeq|**2 - Req**2),
    and Xeq = 0 when Req >= |Zeq| within a relative 1e-9. The magnetising branch is
    neglected: at the reduced test voltage its current is a tiny part of Isc.
    The ohms do not depend on the test current; the measured power at another current
    scales with the current squared (``scale_to_current``).

    References
    ----------
    Standard textbook short-circuit test (docs/references.md R7).
    """
    v_ph, i, p_ph, _ = _measured_per_phase(voltage_v, current_a, power_w, phases)
    req = p_ph / (i * i)
    zeq = v_ph / i
    with np.errstate(invalid="ignore"):
        xeq = np.sqrt(np.where(req >= zeq * (1.0 - UNITY_POWER_FACTOR_RTOL), 0.0, zeq * zeq - req * req))
    return SeriesBranch(as_output(req), as_output(xeq), as_output(zeq))


def impedance_percent(zeq_ohm: Any, voltage_v: Any, rating_kva: Any) -> float | np.ndarray:
    """Short-circuit impedance in percent of the base impedance of the same side.

    Parameters
    ----------
    zeq_ohm : float or array_like
        |Zeq| [ohm per phase] referred to the side whose rated voltage is given, >= 0.
    voltage_v : float or array_like
        Rated voltage of that side [V], > 0 (line-to-line for three-phase units).
    rating_kva : float or array_like
        Rated power [kVA], > 0.

    Returns
    -------
    float or numpy.ndarray
        z [percent]: the impedance voltage at rated current in percent of rated voltage.

    Notes
    -----
    z = 100 * |Zeq| / Zbase, Zbase = V**2 / (1000 * S). The same on either side when
    the ohms and the voltage belong to the same side.

    References
    ----------
    Per-unit system (docs/references.md R7).
    """
    z = _non_negative("zeq_ohm", zeq_ohm)
    return as_output(100.0 * z / base_impedance_ohm(voltage_v, rating_kva))


def refer_impedance(ohm: Any, from_voltage_v: Any, to_voltage_v: Any) -> float | np.ndarray:
    """Refer an impedance from one winding's side to the other's.

    Parameters
    ----------
    ohm : float or array_like
        Impedance on the ``from`` side [ohm], >= 0; infinity allowed (an open shunt).
    from_voltage_v, to_voltage_v : float or array_like
        Rated voltages of the two sides [V], > 0 (their ratio is the turns ratio for a
        two-winding unit; line-to-line for three-phase units, whose star-equivalent
        ratio is the same).

    Returns
    -------
    float or numpy.ndarray
        The impedance on the ``to`` side [ohm].

    Notes
    -----
    Z_to = Z_from * (V_to / V_from)**2; with a = V_hv / V_lv, Z_hv = a**2 * Z_lv.

    References
    ----------
    Standard textbook referral across the ideal transformer (docs/references.md R7).
    """
    z = _impedance("ohm", ohm)
    v_from = _positive("from_voltage_v", from_voltage_v)
    v_to = _positive("to_voltage_v", to_voltage_v)
    return as_output(z * (v_to / v_from) ** 2)


def split_series(req_ohm: Any, xeq_ohm: Any, ratio: Any = 0.5) -> SeriesSplit:
    """Split the series branch between the two windings, all referred to one side.

    Parameters
    ----------
    req_ohm, xeq_ohm : float or array_like
        Req and Xeq [ohm per phase], >= 0, referred to one side.
    ratio : float or array_like, optional
        Share given to winding 1 (the supply side of the T circuit), 0..1. Default 0.5.

    Returns
    -------
    SeriesSplit
        (r1_ohm, x1_ohm, r2_ohm, x2_ohm), R2 and X2 referred to the same side as Req.

    Notes
    -----
    R1 = ratio * Req, R2' = (1 - ratio) * Req, and the same for X. The default equal
    split in ohms on one side is an equal split in per unit between the windings, the
    usual assumption when the windings' DC resistances are not measured separately
    (no test separates the two leakage reactances). The split moves the shunt branch
    along the series impedance; its effect on losses is second order.

    References
    ----------
    Standard textbook assumption R1 = R2' = Req / 2, X1 = X2' = Xeq / 2
    (docs/references.md R7).
    """
    req = _non_negative("req_ohm", req_ohm)
    xeq = _non_negative("xeq_ohm", xeq_ohm)
    share = float_array("ratio", ratio)
    check_array_range("ratio", share, low=0.0, high=1.0)
    return SeriesSplit(
        as_output(share * req), as_output(share * xeq),
        as_output((1.0 - share) * req), as_output((1.0 - share) * xeq),
    )


def correct_load_loss_to_reference(
    measured_w: Any,
    i2r_w: Any,
    winding_temp_c: Any,
    reference_temp_c: Any,
    conductor: str = "copper",
    standard: str = "iec",
) -> float | np.ndarray:
    """Load loss measured at one winding temperature, corrected to the reference temperature.

    Parameters
    ----------
    measured_w : float or array_like
        Load loss P measured at winding temperature tm [W], >= 0.
    i2r_w : float or array_like
        Its resistive part I**2 R at tm, from the DC resistances and the test current
        [W], 0 <= I2R <= P.
    winding_temp_c : float or array_like
        Average winding temperature during the test tm [deg C].
    reference_temp_c : float or array_like
        Reference temperature tr [deg C]: 75 C in IEC 60076-1; 85 C for 65 C-rise
        liquid units in IEEE C57.12.00/.90.
    conductor : {"copper", "aluminium"}, optional
        Winding material ("aluminum" accepted). Default copper.
    standard : {"iec", "ieee"}, optional
        Which standard's temperature constant to use. Default "iec".

    Returns
    -------
    float or numpy.ndarray
        P(tr) [W].

    Notes
    -----
    P(tr) = I2R * (C + tr) / (C + tm) + (P - I2R) * (C + tm) / (C + tr).
    The resistive loss rises with resistance; the additional (eddy and stray) loss,
    P - I2R, falls as resistance rises. C: IEC copper 235, aluminium 225; IEEE copper
    234.5, aluminium 225 (``TEMPERATURE_CONSTANT_C``).

    References
    ----------
    IEC 60076-1 and IEEE C57.12.90, load-loss temperature correction (formula and
    constants from memory, docs/references.md R7: check against the standards).
    """
    key_conductor = "aluminium" if conductor == "aluminum" else conductor
    if key_conductor not in ("copper", "aluminium"):
        raise InvalidInput("conductor", f"must be 'copper' or 'aluminium', got {conductor!r}")
    if standard not in ("iec", "ieee"):
        raise InvalidInput("standard", f"must be 'iec' or 'ieee', got {standard!r}")
    c = TEMPERATURE_CONSTANT_C[(standard, key_conductor)]
    p = _non_negative("measured_w", measured_w)
    i2r = _non_negative("i2r_w", i2r_w)
    tm = float_array("winding_temp_c", winding_temp_c)
    tr = float_array("reference_temp_c", reference_temp_c)
    check_array_range("winding_temp_c", tm, low=-c, low_open=True)
    check_array_range("reference_temp_c", tr, low=-c, low_open=True)
    if np.any(i2r > p):
        raise InvalidInput("i2r_w", "must not exceed measured_w (the additional loss P - I2R "
                                    "cannot be negative)")
    factor = (c + tr) / (c + tm)
    return as_output(i2r * factor + (p - i2r) / factor)


def scale_to_current(power_w: Any, test_current_a: Any, target_current_a: Any) -> float | np.ndarray:
    """Scale a load loss measured at one current to another current.

    Parameters
    ----------
    power_w : float or array_like
        Loss measured at the test current [W], >= 0.
    test_current_a : float or array_like
        Test current [A], > 0.
    target_current_a : float or array_like
        Current to scale to, usually rated current [A], >= 0.

    Returns
    -------
    float or numpy.ndarray
        P * (I_target / I_test)**2 [W].

    Notes
    -----
    Load loss is proportional to the current squared at a fixed temperature (IEC 60076-1
    allows the short-circuit test at reduced current, from memory, with this correction).

    References
    ----------
    Common practice; docs/references.md R7.
    """
    p = _non_negative("power_w", power_w)
    i_test = _positive("test_current_a", test_current_a)
    i_target = _non_negative("target_current_a", target_current_a)
    return as_output(p * (i_target / i_test) ** 2)


def _lagging_array(lagging: Any) -> np.ndarray:
    array = np.asarray(lagging)
    if array.dtype != np.bool_:
        raise InvalidInput("lagging", f"must be True/False or an array of them, got {lagging!r}")
    return array


def solve_t_circuit(
    r1_ohm: Any,
    x1_ohm: Any,
    r2_ohm: Any,
    x2_ohm: Any,
    r0_ohm: Any,
    x0_ohm: Any,
    rated_voltage_v: Any,
    rating_kva: Any,
    load_pu: Any,
    power_factor: Any = 1.0,
    lagging: Any = True,
    phases: Any = 3,
    output_voltage_v: Any = None,
) -> CircuitSolution:
    """Exact complex solution of the T-equivalent circuit with a load at the output terminals.

    Parameters
    ----------
    r1_ohm, x1_ohm : float or array_like
        Supply-side winding resistance and leakage reactance [ohm per phase], >= 0.
    r2_ohm, x2_ohm : float or array_like
        Load-side winding resistance and leakage reactance, referred to the same side
        [ohm per phase], >= 0.
    r0_ohm, x0_ohm : float or array_like
        Shunt branch, R0 in parallel with X0 [ohm per phase], > 0; ``math.inf`` allowed
        (no core loss, or no magnetising current).
    rated_voltage_v : float or array_like
        Rated voltage of the side the ohms are referred to [V], > 0 (line-to-line for
        three-phase units).
    rating_kva : float or array_like
        Rated power [kVA], > 0.
    load_pu : float or array_like
        Loading k [pu of rated current], >= 0; at rated output voltage this is also pu
        of rated power.
    power_factor : float or array_like, optional
        Load power factor 0..1. Default 1.
    lagging : bool or array_like of bool, optional
        True for a lagging (inductive) load, False for leading. Default True.
    phases : int, optional
        1 or 3. Default 3.
    output_voltage_v : float or array_like, optional
        Output terminal voltage |V2'| referred to the circuit's side [V], > 0.
        Default: the rated voltage.

    Returns
    -------
    CircuitSolution
        Terminal quantities, powers, each loss, efficiency and regulation; all fields
        broadcast over the array inputs.

    Notes
    -----
    Per phase, with the output voltage as the reference phasor V2' = |V2'| at 0 degrees,
    I2' = k * I_rated * exp(-j acos(pf)) lagging or exp(+j acos(pf)) leading,
    Z1 = R1 + jX1, Z2 = R2' + jX2', Y0 = 1/R0 + 1/(jX0) (an infinite R0 or X0 adds
    nothing):

        Vm = V2' + I2' Z2,  Im = Vm Y0,  I1 = I2' + Im,  V1 = Vm + I1 Z1.

    S_in = V1 I1*, S_out = V2' I2*, copper losses |I1|^2 R1 and |I2'|^2 R2', core loss
    |Vm|^2 / R0; totals are ``phases`` times the per-phase values. Input power equals
    output power plus the three losses exactly (up to rounding). Efficiency is
    P_out / P_in (0 when nothing is delivered).
    Regulation: V2 no-load = V1 / (1 + Z1 Y0) is the open-circuit output voltage for the
    same input voltage (V1 itself when the shunt branch is open), and
    regulation = (|V2 no-load| - |V2'|) / |V2'| * 100. It is positive for lagging loads
    and can be negative for leading loads (the capacitive current raises the output
    voltage).

    References
    ----------
    Standard textbook T-equivalent circuit of the two-winding transformer
    (docs/references.md R7). Regulation as in textbooks, over the loaded output
    voltage; IEC 60076-1 states the voltage drop at a specified load with the other
    winding at rated voltage and refers it to the rated voltage instead (from memory);
    the two differ by about the square of the drop, under 0.1 percentage point for
    distribution units.
    """
    count = _phases(phases)
    r1 = _impedance("r1_ohm", r1_ohm)
    x1 = _impedance("x1_ohm", x1_ohm)
    r2 = _impedance("r2_ohm", r2_ohm)
    x2 = _impedance("x2_ohm", x2_ohm)
    for name, array in (("r1_ohm", r1), ("x1_ohm", x1), ("r2_ohm", r2), ("x2_ohm", x2)):
        if np.any(np.isinf(array)):
            raise InvalidInput(name, "must be finite (only the shunt branch may be open)")
    r0 = _impedance("r0_ohm", r0_ohm, positive=True)
    x0 = _impedance("x0_ohm", x0_ohm, positive=True)
    v_rated = _positive("rated_voltage_v", rated_voltage_v)
    s_kva = _positive("rating_kva", rating_kva)
    k = _non_negative("load_pu", load_pu)
    pf = float_array("power_factor", power_factor)
    check_array_range("power_factor", pf, low=0.0, high=1.0)
    lag = _lagging_array(lagging)
    v_out = v_rated if output_voltage_v is None else _positive("output_voltage_v", output_voltage_v)

    v2 = _phase_voltage(v_out, count).astype(complex)
    i_rated = s_kva * 1000.0 / (count * _phase_voltage(v_rated, count))
    # pf - j sin(phi) lagging, pf + j sin(phi) leading; built from pf itself (not
    # exp(j acos(pf))) so that the active part, and a zero output at pf = 0, are exact.
    sin_phi = np.sqrt(np.clip(1.0 - pf * pf, 0.0, None))
    i2 = k * i_rated * (pf + 1j * np.where(lag, -1.0, 1.0) * sin_phi)
    z1 = r1 + 1j * x1
    z2 = r2 + 1j * x2
    g0 = 1.0 / r0
    y0 = g0 - 1j / x0  # 1/(jX0) = -j/X0; 1/inf = 0 opens the branch

    vm = v2 + i2 * z2
    i1 = i2 + vm * y0
    v1 = vm + i1 * z1
    s_in = count * v1 * np.conj(i1)
    s_out = count * v2 * np.conj(i2)
    cu1 = count * np.abs(i1) ** 2 * r1
    cu2 = count * np.abs(i2) ** 2 * r2
    core = count * np.abs(vm) ** 2 * g0
    losses = cu1 + cu2 + core
    p_in, p_out = s_in.real, s_out.real
    with np.errstate(divide="ignore", invalid="ignore"):
        eta = np.where(p_out == 0.0, 0.0, p_out / p_in)
    eta = np.where(np.isnan(p_out) | np.isnan(p_in), np.nan, eta)
    v2_no_load = v1 / (1.0 + z1 * y0)
    regulation = (np.abs(v2_no_load) - np.abs(v2)) / np.abs(v2) * 100.0

    line = SQRT3 if count == 3 else 1.0
    shape = np.broadcast_shapes(*(np.shape(a) for a in (r1, x1, r2, x2, r0, x0, v_rated, s_kva, k, pf,
                                                        lag, v_out)))

    def out(value: Any) -> float | np.ndarray:
        return as_output(np.broadcast_to(value, shape))

    return CircuitSolution(
        input_voltage_v=out(np.abs(v1) * line),
        input_current_a=out(np.abs(i1)),
        output_voltage_v=out(np.abs(v2) * line),
        output_current_a=out(np.abs(i2)),
        input_power_w=out(p_in),
        output_power_w=out(p_out),
        input_reactive_power_var=out(s_in.imag),
        output_reactive_power_var=out(s_out.imag),
        primary_copper_loss_w=out(cu1),
        secondary_copper_loss_w=out(cu2),
        core_loss_w=out(core),
        losses_w=out(losses),
        efficiency=out(eta),
        regulation_pct=out(regulation),
    )


@dataclass(frozen=True)
class EquivalentCircuit:
    """Per-phase T-equivalent circuit of a two-winding unit, referred to one side.

    Attributes
    ----------
    rating_kva : float
        Rated power [kVA].
    phases : int
        1 or 3.
    side : {"hv", "lv"}
        The side every ohm value is referred to.
    rated_voltage_v : float
        Rated voltage of that side [V] (line-to-line for three-phase units).
    r0_ohm, x0_ohm : float
        Shunt branch R0 || X0 [ohm per phase]; ``x0_ohm`` may be ``math.inf``.
    req_ohm, xeq_ohm : float
        Series branch [ohm per phase].
    r1_ohm, x1_ohm, r2_ohm, x2_ohm : float
        Series branch split equally between winding 1 (supply side) and winding 2
        (load side), both on ``side`` [ohm per phase].
    impedance_pct : float
        Short-circuit impedance from the short-circuit test [percent of the base
        impedance of the side it was measured on; the same number on either side].
    """

    rating_kva: float
    phases: int
    side: Side
    rated_voltage_v: float
    r0_ohm: float
    x0_ohm: float
    req_ohm: float
    xeq_ohm: float
    r1_ohm: float
    x1_ohm: float
    r2_ohm: float
    x2_ohm: float
    impedance_pct: float

    def solve(self, load_pu: Any, power_factor: Any = 1.0, lagging: Any = True,
              output_voltage_v: Any = None) -> CircuitSolution:
        """``solve_t_circuit`` on this circuit (see there for units and conventions)."""
        return solve_t_circuit(
            self.r1_ohm, self.x1_ohm, self.r2_ohm, self.x2_ohm, self.r0_ohm, self.x0_ohm,
            self.rated_voltage_v, self.rating_kva, load_pu, power_factor, lagging, self.phases,
            output_voltage_v,
        )


def _test_reading(field: str, reading: Any) -> tuple[Side, float, float, float]:
    try:
        side, voltage, current, power = reading
    except (TypeError, ValueError):
        raise InvalidInput(field, "must be (side, voltage_v, current_a, power_w)") from None
    if side not in ("hv", "lv"):
        raise InvalidInput(field, f"side must be 'hv' or 'lv', got {side!r}")
    return side, voltage, current, power


def circuit_from_tests(
    rating_kva: float,
    phases: int,
    hv_v: float,
    lv_v: float,
    open_circuit: tuple[Side, float, float, float],
    short_circuit: tuple[Side, float, float, float],
    circuit_side: Side = "hv",
) -> EquivalentCircuit:
    """The per-phase T-equivalent circuit of a two-winding unit from its two tests.

    Parameters
    ----------
    rating_kva : float
        Rated power [kVA], > 0.
    phases : int
        1 or 3.
    hv_v, lv_v : float
        Rated voltages [V], hv_v >= lv_v > 0 (line-to-line for three-phase units).
    open_circuit : (side, voltage_v, current_a, power_w)
        Open-circuit test: the side it was made on ("hv" or "lv"), applied voltage [V],
        no-load current [A], no-load power [W] (three-phase: line values and total power).
    short_circuit : (side, voltage_v, current_a, power_w)
        Short-circuit test, the same way.
    circuit_side : {"hv", "lv"}, optional
        The side to refer the circuit to. Default "hv".

    Returns
    -------
    EquivalentCircuit
        All ohms on ``circuit_side``; the series branch split equally between windings.

    Notes
    -----
    Each test gives its branch on the side measured (``shunt_branch_from_open_circuit``,
    ``series_branch_from_short_circuit``); each branch is then referred to
    ``circuit_side`` by (V_to / V_from)**2 with the rated voltages. The impedance
    percentage uses the base impedance of the side the short-circuit test was made on.

    References
    ----------
    Standard textbook method (docs/references.md R7).
    """
    s_kva = finite_scalar("rating_kva", rating_kva, low=0.0, low_open=True)
    count = _phases(phases)
    v_hv = finite_scalar("hv_v", hv_v, low=0.0, low_open=True)
    v_lv = finite_scalar("lv_v", lv_v, low=0.0, low_open=True)
    if v_hv < v_lv:
        raise InvalidInput("hv_v", f"must be >= lv_v ({v_lv:g} V), got {v_hv:g}")
    if circuit_side not in ("hv", "lv"):
        raise InvalidInput("circuit_side", f"must be 'hv' or 'lv', got {circuit_side!r}")
    rated = {"hv": v_hv, "lv": v_lv}

    oc_side, oc_v, oc_i, oc_p = _test_reading("open_circuit", open_circuit)
    sc_side, sc_v, sc_i, sc_p = _test_reading("short_circuit", short_circuit)
    try:
        shunt = shunt_branch_from_open_circuit(oc_v, oc_i, oc_p, count)
    except InvalidInput as error:
        raise InvalidInput("open_circuit", str(error)) from None
    try:
        series = series_branch_from_short_circuit(sc_v, sc_i, sc_p, count)
    except InvalidInput as error:
        raise InvalidInput("short_circuit", str(error)) from None

    def to_circuit(ohm: float | np.ndarray, side: Side) -> float:
        return float(refer_impedance(ohm, rated[side], rated[circuit_side]))

    req = to_circuit(series.req_ohm, sc_side)
    xeq = to_circuit(series.xeq_ohm, sc_side)
    r1, x1, r2, x2 = split_series(req, xeq)
    return EquivalentCircuit(
        rating_kva=s_kva,
        phases=count,
        side=circuit_side,
        rated_voltage_v=rated[circuit_side],
        r0_ohm=to_circuit(shunt.r0_ohm, oc_side),
        x0_ohm=to_circuit(shunt.x0_ohm, oc_side),
        req_ohm=req,
        xeq_ohm=xeq,
        r1_ohm=float(r1),
        x1_ohm=float(x1),
        r2_ohm=float(r2),
        x2_ohm=float(x2),
        impedance_pct=float(impedance_percent(series.zeq_ohm, rated[sc_side], s_kva)),
    )
