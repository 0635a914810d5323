"""What the factory-test pages show: a lot's test certificates with their summary and chart, the
certificate and test-analysis forms (flat boxes to the nested schema and back), and a tender's
contract terms for the tests.

Nothing here writes; the form helpers are pure and tested on their own.
"""

from __future__ import annotations

from datetime import date
from typing import Any

from pydantic import ValidationError
from sqlalchemy.orm import Session

from server import schemas
from server.pages.certificate_charts import analysis_curves_chart, certificate_losses_chart, component_limits_pct
from server.pages.forms import FormValues, plain_message
from server.services import locks, tenders
from server.services import test_certificates as service

# The readings boxes share their names with the import file's columns (CERTIFICATE_COLUMNS):
# oc_ for the open-circuit test, sc_ for the short-circuit test.
PARTS = {"open_circuit": "oc_", "short_circuit": "sc_", "guarantee": "g_"}
READING_BOXES = {
    "open_circuit": ("side", "voltage_v", "current_a", "power_w"),
    "short_circuit": ("side", "voltage_v", "current_a", "power_w", "winding_temp_c", "i2r_w"),
}
CERTIFICATE_BOXES = ("serial_number", "test_date", "laboratory", "conductor", "reference_temp_c")
STANDARD_NAMES = {"iec": "IEC 60076-1", "ieee": "IEEE C57.12.00"}
SIDE_CHOICES = [("hv", "HV winding"), ("lv", "LV winding")]
CONDUCTOR_CHOICES = [("copper", "Copper"), ("aluminium", "Aluminium")]

# Loadings the analysis chart draws [pu of the rating]: 0 to 1.5 in steps of 0.05.
CURVE_LOADINGS_PU = [round(0.05 * k, 2) for k in range(31)]
OPERATING_POINT_ROWS = 3


def _readings(form: FormValues, part: str) -> dict[str, Any]:
    """One test's boxes as the schema's nested object; empty optional boxes are left out."""
    prefix = PARTS[part]
    values = {name: form.get(prefix + name, "") for name in READING_BOXES[part]}
    optional = {"side", "i2r_w"}
    return {name: value for name, value in values.items() if value != "" or name not in optional}


def certificate_data(form: FormValues) -> dict[str, Any]:
    """The certificate form as ``schemas.CertificateIn`` takes it."""
    data: dict[str, Any] = {name: form.get(name, "") for name in CERTIFICATE_BOXES}
    for name in ("conductor", "reference_temp_c"):
        if data[name] == "":
            data.pop(name)
    return data | {part: _readings(form, part) for part in READING_BOXES}


def box_name(loc: tuple[Any, ...] | list[Any] | str) -> str:
    """The form box a schema location or a service field names: ("short_circuit", "i2r_w") and
    "short_circuit.i2r_w" are both "sc_i2r_w"; ("operating_points", 1, "load_pu") is "op2_load_pu"."""
    parts = loc.split(".") if isinstance(loc, str) else [p for p in loc if p != "body"]
    if not parts:
        return "form"
    head = parts[0]
    if head in PARTS and len(parts) > 1:
        return PARTS[head] + str(parts[1])
    if head == "operating_points" and len(parts) > 2 and isinstance(parts[1], int):
        return f"op{parts[1] + 1}_{parts[2]}"
    return str(head)


def reading_errors(exc: ValidationError, rows: list[int] | None = None) -> dict[str, str]:
    """The first message for each box; ``rows`` maps an operating point's place in the list to the
    row of the form it came from (empty rows are not sent)."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = list(error.get("loc", ()))
        if rows is not None and len(loc) > 2 and loc[0] == "operating_points" and isinstance(loc[1], int):
            if loc[1] >= len(rows):  # one of the curve's points: its power factor is the curve's box
                errors.setdefault(f"curve_{loc[2]}", plain_message(error))
                continue
            loc[1] = rows[loc[1]] - 1
        errors.setdefault(box_name(tuple(loc)), plain_message(error))
    return errors


def certificate_defaults() -> dict[str, str]:
    return {"test_date": date.today().isoformat(), "conductor": "copper", "oc_side": "lv", "sc_side": "hv"}


# --- a lot's certificates ---------------------------------------------------------------------

def _awarded_offer(session: Session, lot_id: int) -> dict[str, Any] | None:
    """The awarded offer as the standing evaluation record froze it, or None."""
    record = locks.active_record(session, lot_id)
    if record is None:
        return None
    return next((o for o in record.inputs["offers"] if o["id"] == record.awarded_offer_id), None)


def lot_section(session: Session, lot_id: int) -> dict[str, Any]:
    """The lot page's test certificates: the summary and chart once the lot is awarded."""
    if locks.active_record(session, lot_id) is None:
        return {"certificate_summary": None}
    summary = service.lot_summary(session, lot_id)
    certificates = [service.certificate_out(c) for c in service.list_certificates(session, lot_id)]
    return {
        "certificate_summary": summary,
        "certificate_chart": certificate_losses_chart(summary, certificates) if certificates else None,
        "standard_names": STANDARD_NAMES,
        "limits_pct": component_limits_pct(summary.tolerance_standard),
    }


def certificates_page(session: Session, lot_id: int, **extra: Any) -> dict[str, Any]:
    """The certificates page: the lot, its summary and chart, every certificate, and the forms."""
    lot = tenders.get_lot(session, lot_id)
    offer = _awarded_offer(session, lot_id)
    summary = service.lot_summary(session, lot_id)
    certificates = [service.certificate_out(c) for c in service.list_certificates(session, lot_id)]
    return {
        "lot": lot,
        "tender": lot.tender,
        "awarded_offer": offer,
        "certificate_summary": summary if offer else None,
        "certificates": certificates,
        "certificate_chart": certificate_losses_chart(summary, certificates) if offer and certificates else None,
        "standard_names": STANDARD_NAMES,
        "limits_pct": component_limits_pct(summary.tolerance_standard),
        "columns": service.CERTIFICATE_COLUMNS,
        "entry_form": certificate_defaults(),
        "entry_errors": {},
        "import_refused": None,
        "side_choices": SIDE_CHOICES,
        "conductor_choices": CONDUCTOR_CHOICES,
    } | extra


# --- a tender's contract terms ---------------------------------------------------------------------

TERMS_BOXES = ("tolerance_standard", "penalty_multiplier", "penalty_credit_below", "reject_beyond_tolerance")


def terms_form(tender: schemas.TenderOut) -> dict[str, Any]:
    """The contract-terms boxes filled from the stored tender."""
    return {name: getattr(tender, name) for name in TERMS_BOXES} | {"version": tender.version}


def terms_data(form: FormValues) -> dict[str, Any]:
    """The contract-terms form as a tender patch; an unticked box is not posted at all."""
    return {
        "version": form.get("version", ""),
        "tolerance_standard": form.get("tolerance_standard", ""),
        "penalty_multiplier": form.get("penalty_multiplier", ""),
        "penalty_credit_below": form.get("penalty_credit_below") == "true",
        "reject_beyond_tolerance": form.get("reject_beyond_tolerance") == "true",
    }


# --- the test-analysis tool ---------------------------------------------------------------------

# An invented 400 kVA 20/0.4 kV unit, so the page shows a worked analysis before anything is typed.
ANALYSIS_EXAMPLE = {
    "rating_kva": "400", "phases": "3", "hv_v": "20000", "lv_v": "400", "frequency_hz": "50",
    "conductor": "copper", "reference_temp_c": "75", "standard": "iec", "circuit_side": "hv",
    "oc_side": "lv", "oc_voltage_v": "400", "oc_current_a": "1.2", "oc_power_w": "380",
    "sc_side": "hv", "sc_voltage_v": "800", "sc_current_a": "11.547", "sc_power_w": "3600",
    "sc_winding_temp_c": "25", "sc_i2r_w": "3000",
    "g_no_load_loss_w": "400", "g_load_loss_w": "4000", "g_impedance_pct": "4", "g_no_load_current_pct": "0.5",
    "op1_load_pu": "0.5", "op1_power_factor": "0.9", "op1_lagging": "true",
    "op2_load_pu": "1", "op2_power_factor": "0.8", "op2_lagging": "true",
    "op3_load_pu": "1", "op3_power_factor": "0.8", "op3_lagging": "false",
    "curve_power_factor": "0.8", "curve_lagging": "true",
}
ANALYSIS_TOP = ("rating_kva", "phases", "hv_v", "lv_v", "frequency_hz", "conductor", "reference_temp_c", "standard",
                "circuit_side")
GUARANTEE_BOXES = ("no_load_loss_w", "load_loss_w", "impedance_pct", "no_load_current_pct")


def analysis_form(query: FormValues) -> dict[str, str]:
    """The tool's boxes: as asked in the address, else the invented example."""
    return dict(query) if query else dict(ANALYSIS_EXAMPLE)


def _operating_rows(form: FormValues) -> tuple[list[dict[str, Any]], list[int]]:
    """The operating points typed (rows left empty are skipped) and the form row of each."""
    points, rows = [], []
    for row in range(1, OPERATING_POINT_ROWS + 1):
        load = form.get(f"op{row}_load_pu", "")
        if load == "":
            continue
        point: dict[str, Any] = {"load_pu": load, "lagging": form.get(f"op{row}_lagging", "true") != "false"}
        if form.get(f"op{row}_power_factor", "") != "":
            point["power_factor"] = form[f"op{row}_power_factor"]
        points.append(point)
        rows.append(row)
    return points, rows


def analysis_data(form: FormValues) -> tuple[dict[str, Any], list[int]]:
    """The tool's form as ``schemas.TestAnalysisIn`` takes it, with the curve's points after the
    typed ones; and the form row of each typed operating point.

    The guarantee is sent only when both losses are given (it is optional as a whole).
    """
    data: dict[str, Any] = {name: form.get(name, "") for name in ANALYSIS_TOP}
    for name in set(ANALYSIS_TOP) - {"rating_kva", "hv_v", "lv_v"}:
        if data[name] == "":
            data.pop(name)  # the schema's default
    if data.get("phases", "").isdigit():
        data["phases"] = int(data["phases"])
    data |= {part: _readings(form, part) for part in READING_BOXES}
    guarantee = {name: form.get("g_" + name, "") for name in GUARANTEE_BOXES}
    if guarantee["no_load_loss_w"] or guarantee["load_loss_w"]:
        data["guarantee"] = {k: v for k, v in guarantee.items() if v != "" or k in ("no_load_loss_w", "load_loss_w")}
    points, rows = _operating_rows(form)
    curve = {"power_factor": form.get("curve_power_factor", "") or "1",
             "lagging": form.get("curve_lagging", "true") != "false"}
    data["operating_points"] = points + [{"load_pu": k} | curve for k in CURVE_LOADINGS_PU]
    return data, rows


def analysis_view(result: schemas.TestAnalysisOut, typed_points: int) -> dict[str, Any]:
    """The analysis with its typed operating points apart from the curve's, and the curve chart."""
    curve = result.operating_points[typed_points:]
    return {
        "result": result.model_copy(update={"operating_points": result.operating_points[:typed_points]}),
        "analysis_chart": analysis_curves_chart(curve) if curve else None,
        "curve_point": curve[0] if curve else None,
    }
