"""Use cases for factory test certificates: analyse readings, store certificates of an awarded
lot's delivered units with their verdict and penalty, summarise a lot, and hand out the import
file's template."""

from __future__ import annotations

import io
import math
from typing import Any

import numpy as np
from pydantic import ValidationError
from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.errors import InvalidInput
from domain.factory_tests import (
    iec_60076_1_verdict,
    ieee_c57_12_00_verdict,
    loss_penalty,
    summarise_deviations,
    within_tolerance,
)
from domain.routine_tests import Reading, routine_test_figures
from server import schemas
from server.errors import Conflict, ImportRefused, InvalidField
from server.exports import write_csv, xlsx_text
from server.services.common import commit
from server.services.locks import active_record
from server.services.tenders import get_lot
from server.storage import audit
from server.storage.models import TestCertificate
from server.tabular import cell_text, read_table


def _reading(part: schemas.OpenCircuitIn | schemas.ShortCircuitIn) -> Reading:
    return Reading(part.side, part.voltage_v, part.current_a, part.power_w)


def _figures(data: schemas.TestAnalysisIn):
    sc = data.short_circuit
    try:
        return routine_test_figures(
            rating_kva=data.rating_kva, phases=data.phases, hv_v=data.hv_v, lv_v=data.lv_v,
            open_circuit=_reading(data.open_circuit), short_circuit=_reading(sc),
            winding_temp_c=sc.winding_temp_c, reference_temp_c=data.reference_temp_c,
            conductor=data.conductor, standard=data.standard, i2r_w=sc.i2r_w,
            resistance_hv_ohm=sc.resistance_hv_ohm, resistance_lv_ohm=sc.resistance_lv_ohm,
            circuit_side=data.circuit_side,
        )
    except InvalidInput as exc:
        raise InvalidField(exc.field, exc.message) from exc


def _verdict(data: schemas.TestAnalysisIn, figures) -> list:
    g = data.guarantee
    if g is None:
        return []
    if data.standard == "ieee":
        return ieee_c57_12_00_verdict(g.no_load_loss_w, g.load_loss_w, figures.no_load_loss_w,
                                      figures.load_loss_at_reference_w)
    return iec_60076_1_verdict(
        g.no_load_loss_w, g.load_loss_w, figures.no_load_loss_w, figures.load_loss_at_reference_w,
        g.impedance_pct, figures.impedance_pct if g.impedance_pct is not None else None,
        g.no_load_current_pct, figures.no_load_current_pct if g.no_load_current_pct is not None else None,
    )


def analyse(data: schemas.TestAnalysisIn) -> schemas.TestAnalysisOut:
    """Everything the readings give, computed and returned, nothing stored."""
    figures = _figures(data)
    findings = _verdict(data, figures)
    circuit = figures.circuit
    points = []
    if data.operating_points:
        k = np.array([p.load_pu for p in data.operating_points])
        pf = np.array([p.power_factor for p in data.operating_points])
        lag = np.array([p.lagging for p in data.operating_points])
        solution = circuit.solve(k, pf, lag)
        for j, point in enumerate(data.operating_points):
            points.append(schemas.OperatingPointOut(
                load_pu=point.load_pu, power_factor=point.power_factor, lagging=point.lagging,
                efficiency_pct=100.0 * float(np.atleast_1d(solution.efficiency)[j]),
                regulation_pct=float(np.atleast_1d(solution.regulation_pct)[j]),
                input_power_w=float(np.atleast_1d(solution.input_power_w)[j]),
                output_power_w=float(np.atleast_1d(solution.output_power_w)[j]),
                losses_w=float(np.atleast_1d(solution.losses_w)[j]),
            ))
    return schemas.TestAnalysisOut(
        r0_ohm=circuit.r0_ohm, x0_ohm=None if math.isinf(circuit.x0_ohm) else circuit.x0_ohm,
        req_ohm=circuit.req_ohm, xeq_ohm=circuit.xeq_ohm, r1_ohm=circuit.r1_ohm, x1_ohm=circuit.x1_ohm,
        r2_ohm=circuit.r2_ohm, x2_ohm=circuit.x2_ohm, circuit_side=circuit.side,
        impedance_pct=figures.impedance_pct, impedance_pct_at_test=figures.impedance_pct_at_test,
        no_load_loss_w=figures.no_load_loss_w, load_loss_at_rated_current_w=figures.load_loss_at_rated_current_w,
        load_loss_at_reference_w=figures.load_loss_at_reference_w, no_load_current_pct=figures.no_load_current_pct,
        notes=list(figures.notes), within_tolerance=within_tolerance(findings) if findings else None,
        findings=[schemas.TestFindingOut(rule=f.rule, limit=f.limit, value=f.value, passed=f.passed, source=f.source,
                                         unit=f.unit, note=f.note) for f in findings],
        operating_points=points,
    )


# --- stored certificates -----------------------------------------------------------------------

def _awarded(session: Session, lot):
    record = active_record(session, lot.id)
    if record is None:
        raise Conflict(f"Lot '{lot.name}' is not awarded: test certificates belong to the units of an awarded lot.")
    offer = next(o for o in record.inputs["offers"] if o["id"] == record.awarded_offer_id)
    return record, offer


def _analysis_input(lot, tender, offer: dict, data: schemas.CertificateIn) -> schemas.TestAnalysisIn:
    return schemas.TestAnalysisIn(
        rating_kva=lot.rating_kva, phases=lot.phases, hv_v=lot.hv_kv * 1000, lv_v=lot.lv_kv * 1000,
        frequency_hz=lot.frequency_hz, conductor=data.conductor,
        reference_temp_c=data.reference_temp_c if data.reference_temp_c is not None else lot.reference_temp_c,
        standard=tender.tolerance_standard, open_circuit=data.open_circuit, short_circuit=data.short_circuit,
        guarantee=schemas.GuaranteeIn(
            no_load_loss_w=offer["no_load_loss_w"], load_loss_w=offer["load_loss_w"],
            impedance_pct=offer.get("impedance_pct"), no_load_current_pct=offer.get("no_load_current_pct"),
        ),
    )


def _build(session: Session, lot, record, offer: dict, data: schemas.CertificateIn) -> TestCertificate:
    tender = lot.tender
    analysis = analyse(_analysis_input(lot, tender, offer, data))
    rates = record.inputs["cost_basis"]
    ok = bool(analysis.within_tolerance)
    rejected = tender.reject_beyond_tolerance and not ok
    penalty = loss_penalty(offer["no_load_loss_w"], offer["load_loss_w"], analysis.no_load_loss_w,
                           analysis.load_loss_at_reference_w, rates["no_load_rate_per_kw"], rates["load_rate_per_kw"],
                           tender.penalty_multiplier, tender.penalty_credit_below, rejected=rejected)
    return TestCertificate(
        lot_id=lot.id, offer_id=offer["id"], serial_number=data.serial_number, test_date=data.test_date,
        laboratory=data.laboratory, entered_by=audit.get_actor(session).username,
        readings=data.model_dump(mode="json"), no_load_loss_w=analysis.no_load_loss_w,
        load_loss_at_reference_w=analysis.load_loss_at_reference_w, impedance_pct=analysis.impedance_pct,
        no_load_current_pct=analysis.no_load_current_pct, within_tolerance=ok, penalty=float(penalty.total),
        rejected=rejected,
    )


def _serial_free(session: Session, lot_id: int, serial: str) -> None:
    taken = session.scalar(select(TestCertificate.id).where(TestCertificate.lot_id == lot_id,
                                                            TestCertificate.serial_number == serial))
    if taken is not None:
        raise InvalidField("serial_number", f"unit {serial} already has a certificate in this lot.")


def add_certificate(session: Session, lot_id: int, data: schemas.CertificateIn) -> TestCertificate:
    lot = get_lot(session, lot_id)
    record, offer = _awarded(session, lot)
    _serial_free(session, lot.id, data.serial_number)
    certificate = _build(session, lot, record, offer, data)
    session.add(certificate)
    commit(session, "test certificate")
    return certificate


def list_certificates(session: Session, lot_id: int) -> list[TestCertificate]:
    get_lot(session, lot_id)
    return list(session.scalars(select(TestCertificate).where(TestCertificate.lot_id == lot_id)
                                .order_by(TestCertificate.serial_number)))


def certificate_out(c: TestCertificate) -> schemas.CertificateOut:
    return schemas.CertificateOut(
        id=c.id, lot_id=c.lot_id, offer_id=c.offer_id, serial_number=c.serial_number, test_date=c.test_date,
        laboratory=c.laboratory, entered_by=c.entered_by, entered_at=c.entered_at, no_load_loss_w=c.no_load_loss_w,
        load_loss_at_reference_w=c.load_loss_at_reference_w, impedance_pct=c.impedance_pct,
        no_load_current_pct=c.no_load_current_pct, within_tolerance=c.within_tolerance, penalty=c.penalty,
        rejected=c.rejected, readings=c.readings,
    )


def lot_summary(session: Session, lot_id: int) -> schemas.CertificateSummaryOut:
    """Units tested, deviations from the guarantee, rejections, and the penalty of the accepted units."""
    lot = get_lot(session, lot_id)
    record = active_record(session, lot.id)
    offer = next((o for o in record.inputs["offers"] if o["id"] == record.awarded_offer_id), None) if record else None
    rows = session.execute(
        select(TestCertificate.no_load_loss_w, TestCertificate.load_loss_at_reference_w, TestCertificate.penalty,
               TestCertificate.rejected, TestCertificate.within_tolerance)
        .where(TestCertificate.lot_id == lot.id)
    ).all()
    stats: dict[str, Any] = dict.fromkeys(
        ("no_load_deviation_mean_pct", "no_load_deviation_worst_pct", "load_deviation_mean_pct",
         "load_deviation_worst_pct"))
    if rows and offer:
        p0 = np.array([r[0] for r in rows])
        pk = np.array([r[1] for r in rows])
        d0 = summarise_deviations(np.full_like(p0, offer["no_load_loss_w"]), p0)
        dk = summarise_deviations(np.full_like(pk, offer["load_loss_w"]), pk)
        stats = {"no_load_deviation_mean_pct": float(d0.mean_pct), "no_load_deviation_worst_pct": float(d0.worst_pct),
                 "load_deviation_mean_pct": float(dk.mean_pct), "load_deviation_worst_pct": float(dk.worst_pct)}
    return schemas.CertificateSummaryOut(
        lot_id=lot.id, awarded_offer_id=record.awarded_offer_id if record else None,
        bidder=offer["bidder"] if offer else None, units_ordered=lot.quantity, units_tested=len(rows),
        guaranteed_no_load_loss_w=offer["no_load_loss_w"] if offer else None,
        guaranteed_load_loss_w=offer["load_loss_w"] if offer else None,
        # A rejected unit is sent back: whatever was stored for it, it owes nothing.
        total_penalty=float(sum(r[2] for r in rows if not r[3])), rejected_units=sum(1 for r in rows if r[3]),
        outside_tolerance_units=sum(1 for r in rows if not r[4]),
        tolerance_standard=lot.tender.tolerance_standard, currency=lot.tender.currency, **stats,
    )


# The import file's columns: what each holds, its unit, what an empty cell means, and an invented
# example. The template's notes sheet lists them; the import accepts exactly these names.
COLUMN_NOTES: dict[str, tuple[str, str, str, str | float]] = {
    "serial_number": ("The unit's serial number, read as the text typed", "", "required", "EX-0001"),
    "test_date": ("Date of the routine test", "YYYY-MM-DD", "required", "2027-05-02"),
    "laboratory": ("Where the unit was tested", "", "required", "Works test bay (invented)"),
    "conductor": ("Winding conductor: copper or aluminium", "", "copper", "copper"),
    "reference_temp_c": ("Temperature the load loss is corrected to", "°C", "the lot's reference temperature", 75),
    "oc_side": ("Winding supplied in the open-circuit test: hv or lv", "", "lv", "lv"),
    "oc_voltage_v": ("Open-circuit test voltage", "V", "required", 400),
    "oc_current_a": ("Open-circuit (no-load) current", "A", "required", 1.2),
    "oc_power_w": ("Open-circuit power, the no-load loss", "W", "required", 410),
    "sc_side": ("Winding supplied in the short-circuit test: hv or lv", "", "hv", "hv"),
    "sc_voltage_v": ("Short-circuit test voltage", "V", "required", 800),
    "sc_current_a": ("Short-circuit test current", "A", "required", 11.55),
    "sc_power_w": ("Short-circuit power, the load loss at the test current", "W", "required", 4100),
    "sc_winding_temp_c": ("Winding temperature during the short-circuit test", "°C", "required", 25),
    "sc_i2r_w": ("Resistive part I²R at the test current and temperature", "W",
                 "the whole load loss is corrected as resistive", 3500),
}
CERTIFICATE_COLUMNS = tuple(COLUMN_NOTES)
XLSX_MEDIA_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"


def template_csv(session: Session, lot_id: int) -> str:
    """The import file's header row alone, for an awarded lot.

    No example row: a row left in the file would be imported as a real unit's certificate, and
    a stored certificate cannot be removed. The XLSX template carries an example on a sheet of
    its own, which the import does not read.
    """
    _awarded(session, get_lot(session, lot_id))
    return write_csv(CERTIFICATE_COLUMNS, [])


def template_xlsx(session: Session, lot_id: int) -> bytes:
    """The import workbook for an awarded lot: the header on the first sheet, the one the import
    reads, with the serial number column formatted as text so that "0012" keeps its zeros; and a
    second sheet describing each column with an invented example."""
    from openpyxl import Workbook
    from openpyxl.styles import Font

    lot = get_lot(session, lot_id)
    _awarded(session, lot)
    book = Workbook()
    sheet = book.active
    sheet.title = "Certificates"
    sheet.append(list(CERTIFICATE_COLUMNS))
    for cell in sheet[1]:
        cell.font = Font(bold=True)
        sheet.column_dimensions[cell.column_letter].width = max(12, len(str(cell.value)) + 2)
    sheet.column_dimensions["A"].number_format = "@"
    sheet.freeze_panes = "A2"
    notes = book.create_sheet("Columns")
    notes.append(["column", "what it holds", "unit", "when empty", "example (invented)"])
    for cell in notes[1]:
        cell.font = Font(bold=True)
    for name, (meaning, unit, empty, example) in COLUMN_NOTES.items():
        notes.append([name, meaning, unit, empty, example])
    notes.append([])
    notes.append([xlsx_text(f"Lot {lot.name}: one certificate a row on the first sheet; "
                            "a file with any bad row stores nothing.")])
    for letter, width in zip("ABCDE", (20, 58, 12, 42, 24)):
        notes.column_dimensions[letter].width = width
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def import_certificates(session: Session, lot_id: int, filename: str, content: bytes) -> list[TestCertificate]:
    """Many certificates from one CSV/XLSX file (columns CERTIFICATE_COLUMNS); all or none."""
    lot = get_lot(session, lot_id)
    record, offer = _awarded(session, lot)
    header, rows = read_table(filename, content)
    unknown = [c for c in header if c not in CERTIFICATE_COLUMNS]
    if unknown:
        raise ImportRefused("The header has unknown columns; nothing was stored.",
                            [{"rows": [1], "column": c, "message": "unknown column"} for c in unknown])
    problems, built, seen = [], [], set()
    existing = {c.serial_number for c in list_certificates(session, lot.id)}
    for number, row in enumerate(rows, start=2):
        raw = {name: (row[i] if i < len(row) and row[i] not in ("", None) else None) for i, name in enumerate(header)}
        body = {
            "serial_number": cell_text(raw.get("serial_number")),
            "test_date": raw.get("test_date"), "laboratory": raw.get("laboratory"),
            "conductor": raw.get("conductor") or "copper", "reference_temp_c": raw.get("reference_temp_c"),
            "open_circuit": {"side": raw.get("oc_side") or "lv", "voltage_v": raw.get("oc_voltage_v"),
                             "current_a": raw.get("oc_current_a"), "power_w": raw.get("oc_power_w")},
            "short_circuit": {"side": raw.get("sc_side") or "hv", "voltage_v": raw.get("sc_voltage_v"),
                              "current_a": raw.get("sc_current_a"), "power_w": raw.get("sc_power_w"),
                              "winding_temp_c": raw.get("sc_winding_temp_c"), "i2r_w": raw.get("sc_i2r_w")},
        }
        if hasattr(body["test_date"], "date"):
            body["test_date"] = body["test_date"].date()
        try:
            data = schemas.CertificateIn(**body)
            if data.serial_number in existing or data.serial_number in seen:
                raise InvalidField("serial_number", "this unit already has a certificate")
            seen.add(data.serial_number)
            built.append(_build(session, lot, record, offer, data))
        except ValidationError as exc:
            for err in exc.errors(include_url=False):
                loc = [str(p) for p in err["loc"]]
                column = {"open_circuit": "oc_", "short_circuit": "sc_"}.get(loc[0], "") + (loc[1] if len(loc) > 1 and loc[0] in ("open_circuit", "short_circuit") else loc[0])
                problems.append({"rows": [number], "column": column, "message": err["msg"]})
        except InvalidField as exc:
            problems.append({"rows": [number], "column": exc.field, "message": exc.detail})
    if problems:
        raise ImportRefused("Some rows cannot be used; nothing was stored.", problems)
    session.add_all(built)
    commit(session, "test certificate")
    return built
