"""The award report: what a frozen evaluation record says, gathered for one printable page.

Everything here reads the record's frozen inputs and ranking only, never the live tender,
so the report shows what was decided even after the lot has changed again.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from server.pages.basis_form import input_label, method_boxes
from server.pages.templating import DASH, fmt_plain

# The lot's stated limits the report checks, as the report names them.
_LIMITS = (
    ("max_no_load_loss_w", "most no-load loss"),
    ("max_load_loss_w", "most load loss"),
    ("impedance_pct", "impedance asked"),
)
# IEC 60076-1 Table 1, short-circuit impedance on the principal tap (from memory).
_IMPEDANCE_TOLERANCE_AT_OR_ABOVE_10_PCT = 0.075
_IMPEDANCE_TOLERANCE_BELOW_10_PCT = 0.10


def impedance_tolerance_band(declared_pct: float) -> tuple[float, float]:
    """Lowest and highest short-circuit impedance within the routine-test tolerance.

    Parameters
    ----------
    declared_pct : the declared (here: the lot's required) impedance [%]

    Returns
    -------
    (low_pct, high_pct) [%]

    Notes
    -----
    tolerance t = 0.075 when declared_pct >= 10, else t = 0.10 (a fraction of the declared
    value, not percentage points); band = declared_pct * (1 - t) .. declared_pct * (1 + t).

    References
    ----------
    IEC 60076-1, Table 1, two-winding transformer on the principal tap. From memory:
    verify against the edition of the standard in force.
    """
    tolerance = _IMPEDANCE_TOLERANCE_AT_OR_ABOVE_10_PCT if declared_pct >= 10 else _IMPEDANCE_TOLERANCE_BELOW_10_PCT
    return declared_pct * (1 - tolerance), declared_pct * (1 + tolerance)


def compliance_flags(lot: Mapping[str, Any], offer: Mapping[str, Any]) -> list[str]:
    """What an offer's declared values break among the lot's stated limits, in plain words.

    Checks the guaranteed no-load loss against ``max_no_load_loss_w``, the load loss against
    ``max_load_loss_w`` [W], and the impedance [%] against the lot's ``impedance_pct`` with
    the tolerance of ``impedance_tolerance_band``. A limit the lot does not state is not checked.
    """
    flags = []
    cap = lot.get("max_no_load_loss_w")
    if cap is not None and offer["no_load_loss_w"] > cap:
        flags.append(f"No-load loss {fmt_plain(offer['no_load_loss_w'])} W is above the {fmt_plain(cap)} W allowed.")
    cap = lot.get("max_load_loss_w")
    if cap is not None and offer["load_loss_w"] > cap:
        flags.append(f"Load loss {fmt_plain(offer['load_loss_w'])} W is above the {fmt_plain(cap)} W allowed.")
    asked = lot.get("impedance_pct")
    if asked is not None:
        low, high = impedance_tolerance_band(asked)
        if not low <= offer["impedance_pct"] <= high:
            flags.append(
                f"Impedance {fmt_plain(offer['impedance_pct'])} % is outside {fmt_plain(round(low, 3))} to "
                f"{fmt_plain(round(high, 3))} % (the {fmt_plain(asked)} % asked, with its tolerance)."
            )
    return flags


def _shown(value: Any) -> str:
    if isinstance(value, list):
        return ", ".join(_shown(v) for v in value)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return fmt_plain(value)
    return DASH if value is None else str(value)


def basis_inputs(basis: Mapping[str, Any], currency: str) -> list[tuple[str, str, str]]:
    """The frozen cost basis inputs as (label, value as text, unit), in the editor's order."""
    # An optional input left empty (None) took no part in the rates: leave it out.
    stored = {k: v for k, v in (basis.get("inputs") or {}).items() if k != "method" and v is not None}
    try:
        boxes = method_boxes(basis["method"], currency)
    except KeyError:  # a method this version no longer knows: show the inputs as stored
        boxes = []
    rows = [(box.label, _shown(stored.pop(box.name)), box.unit) for box in boxes if box.name in stored]
    return rows + [(input_label(name), _shown(value), "") for name, value in stored.items()]


def report_view(record: Any, verification: Mapping[str, Any]) -> dict[str, Any]:
    """The report's context from one evaluation record and its live verification."""
    inputs = record.inputs
    lot = inputs["lot"]
    currency = inputs["tender"]["currency"]
    offers = {offer["id"]: offer for offer in inputs["offers"]}
    rows = []
    for row in record.ranking:
        offer = offers.get(row["offer_id"], {})
        rows.append(row | {"offer": offer, "flags": compliance_flags(lot, offer) if offer else []})
    awarded = next((row for row in rows if row["offer_id"] == record.awarded_offer_id), rows[0] if rows else None)
    checked = [label for name, label in _LIMITS if lot.get(name) is not None]
    return {
        "record": record,
        "tender": inputs["tender"],
        "lot": lot,
        "basis": inputs["cost_basis"],
        "basis_inputs": basis_inputs(inputs["cost_basis"], currency),
        "currency": currency,
        "rows": rows,
        "awarded": awarded,
        "limits_checked": checked,
        "flagged": sum(1 for row in rows if row["flags"]),
        "verification": verification,
    }
