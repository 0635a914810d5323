"""From a routine-test certificate's readings to the figures a guarantee is checked against.

Open-circuit test: no-load loss and no-load current. Short-circuit test: load loss and
impedance, scaled to rated current and referred to the reference temperature.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import cast

from domain.circuit import (
    EquivalentCircuit,
    Side,
    circuit_from_tests,
    correct_load_loss_to_reference,
    rated_current_a,
    scale_to_current,
)
from domain.errors import InvalidInput


@dataclass(frozen=True)
class Reading:
    """One test's readings: the side it was made on, line voltage [V], line current [A], total power [W]."""

    side: str
    voltage_v: float
    current_a: float
    power_w: float


@dataclass(frozen=True)
class RoutineTestFigures:
    no_load_loss_w: float
    no_load_current_pct: float
    load_loss_at_rated_current_w: float
    i2r_at_rated_current_w: float
    load_loss_at_reference_w: float
    impedance_pct_at_test: float
    impedance_pct: float
    circuit: EquivalentCircuit
    notes: tuple[str, ...]


def resistive_loss_w(current_hv_a: float, current_lv_a: float, resistance_hv_ohm: float,
                     resistance_lv_ohm: float, phases: int) -> float:
    """I^2R of both windings from their DC resistances (per phase, star equivalent) [W]."""
    return phases * (current_hv_a**2 * resistance_hv_ohm + current_lv_a**2 * resistance_lv_ohm)


def routine_test_figures(
    *,
    rating_kva: float,
    phases: int,
    hv_v: float,
    lv_v: float,
    open_circuit: Reading,
    short_circuit: Reading,
    winding_temp_c: float,
    reference_temp_c: float,
    conductor: str = "copper",
    standard: str = "iec",
    i2r_w: float | None = None,
    resistance_hv_ohm: float | None = None,
    resistance_lv_ohm: float | None = None,
    circuit_side: str = "hv",
) -> RoutineTestFigures:
    """Figures at rated current and reference temperature, and the equivalent circuit there.

    Notes
    -----
    The load loss and its I^2R part are scaled to rated current by (I_r / I_test)^2, then
    referred to the reference temperature (resistive part up, additional part down):
    P(tr) = I2R (C + tr)/(C + tm) + (P - I2R)(C + tm)/(C + tr). Without I^2R or winding
    resistances the whole loss is treated as resistive, which overstates the corrected
    loss (a note says so). The impedance is taken to rated current, split into its
    resistive part u_r = P/S and reactive part u_x = sqrt(u_z^2 - u_r^2); u_x does not
    change with temperature, u_r follows the corrected loss: u_z(tr) = sqrt(u_r(tr)^2 + u_x^2).
    The no-load loss is taken as measured (the test is assumed at rated voltage; a note
    says when it was not).

    References
    ----------
    IEC 60076-1 (load loss and impedance referred to the reference temperature; formula
    from memory, docs/references.md R7); IEEE C57.12.90 likewise.
    """
    notes: list[str] = []
    s_va = rating_kva * 1000.0
    rated = {"hv": hv_v, "lv": lv_v}
    for field, reading in (("open_circuit", open_circuit), ("short_circuit", short_circuit)):
        if reading.side not in rated:
            raise InvalidInput(f"{field}.side", "must be hv or lv")
    oc_rated_v = rated[open_circuit.side]
    if abs(open_circuit.voltage_v / oc_rated_v - 1) > 0.01:
        notes.append(f"The open-circuit test was made at {open_circuit.voltage_v:g} V, not at the rated "
                     f"{oc_rated_v:g} V of that side; the no-load loss is reported as measured.")
    oc_rated_current = rated_current_a(rating_kva, oc_rated_v, phases)
    no_load_current_pct = 100.0 * open_circuit.current_a / oc_rated_current

    sc_rated_v = rated[short_circuit.side]
    sc_rated_current = rated_current_a(rating_kva, sc_rated_v, phases)
    load_loss_rated = scale_to_current(short_circuit.power_w, short_circuit.current_a, sc_rated_current)
    if i2r_w is None and resistance_hv_ohm is not None and resistance_lv_ohm is not None:
        ratio = float(short_circuit.current_a / sc_rated_current)
        i2r_w = resistive_loss_w(ratio * float(rated_current_a(rating_kva, hv_v, phases)),
                                 ratio * float(rated_current_a(rating_kva, lv_v, phases)),
                                 resistance_hv_ohm, resistance_lv_ohm, phases)
    if i2r_w is None:
        i2r_w = short_circuit.power_w
        notes.append("No I2R part or winding resistances were given: the whole load loss was corrected as "
                     "resistive, which overstates it at a reference temperature above the test temperature.")
    if i2r_w > short_circuit.power_w * (1 + 1e-9):
        raise InvalidInput("short_circuit.i2r_w", "the I2R part cannot exceed the measured load loss")
    i2r_rated = scale_to_current(i2r_w, short_circuit.current_a, sc_rated_current)
    load_loss_ref = float(correct_load_loss_to_reference(
        load_loss_rated, min(i2r_rated, load_loss_rated), winding_temp_c, reference_temp_c, conductor, standard))

    uz_test = 100.0 * short_circuit.voltage_v * (sc_rated_current / short_circuit.current_a) / sc_rated_v
    ur_test = 100.0 * load_loss_rated / s_va
    if ur_test > uz_test * (1 + 1e-9):
        raise InvalidInput("short_circuit.power_w", "the loss is larger than the apparent power of the test")
    ux = math.sqrt(max(uz_test**2 - ur_test**2, 0.0))
    ur_ref = 100.0 * load_loss_ref / s_va
    uz_ref = math.hypot(ur_ref, ux)

    # The circuit at the reference temperature: the short-circuit test as it would read there.
    sc_ref = (cast(Side, short_circuit.side), uz_ref / 100.0 * sc_rated_v, float(sc_rated_current), load_loss_ref)
    oc = (cast(Side, open_circuit.side), open_circuit.voltage_v, open_circuit.current_a, open_circuit.power_w)
    circuit = circuit_from_tests(rating_kva, phases, hv_v, lv_v, oc, sc_ref, cast(Side, circuit_side))
    return RoutineTestFigures(
        no_load_loss_w=float(open_circuit.power_w),
        no_load_current_pct=float(no_load_current_pct),
        load_loss_at_rated_current_w=float(load_loss_rated),
        i2r_at_rated_current_w=float(i2r_rated),
        load_loss_at_reference_w=load_loss_ref,
        impedance_pct_at_test=float(uz_test),
        impedance_pct=uz_ref,
        circuit=circuit,
        notes=tuple(notes),
    )
