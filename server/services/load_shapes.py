"""Use cases for load shapes: build from daily curves, import a metered year, read."""

from __future__ import annotations

import math
from datetime import date, datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.errors import InvalidInput
from domain.load_shapes import (
    DayCurves,
    apparent_power,
    expand_daily_curves,
    fill_short_gaps,
    hours_in_year,
    load_duration_curve,
    shape_figures,
)
from server import schemas
from server.errors import ImportRefused, InvalidField
from server.services.common import commit, get_or_404
from server.storage.models import LoadShape
from server.tabular import read_table, rows_text

UNITS = {"pu", "kw", "kva"}
VALUE_COLUMNS = ("load", "kw", "kva", "pu")


def _name_free(session: Session, name: str) -> None:
    if session.scalar(select(LoadShape.id).where(LoadShape.name == name)) is not None:
        raise InvalidField("name", f"a load shape called '{name}' already exists.")


def _store(session: Session, name: str, kind: str, unit: str, year: int, values: np.ndarray,
           seasons: list[dict] | None, source: str, filled: int) -> LoadShape:
    try:
        figures = shape_figures(values)
    except InvalidInput as exc:
        raise InvalidField("values", exc.message) from exc
    shape = LoadShape(
        name=name, kind=kind, unit=unit, year=year, seasons=seasons, values=[float(v) for v in values],
        source=source[:200], filled_hours=filled, peak=figures.peak, load_factor=figures.load_factor,
        loss_factor=figures.loss_factor, rms_pu=figures.rms_pu, equivalent_hours=figures.equivalent_hours,
    )
    session.add(shape)
    commit(session, "load shape", unique_field="name")
    return shape


def create_load_shape(session: Session, data: schemas.DailyShapeCreate | schemas.HourlyShapeCreate) -> LoadShape:
    _name_free(session, data.name)
    if isinstance(data, schemas.DailyShapeCreate):
        curves = [DayCurves(tuple(s.months), tuple(s.weekday), tuple(s.weekend)) for s in data.seasons]
        try:
            values = expand_daily_curves(data.year, curves)
        except InvalidInput as exc:
            raise InvalidField(exc.field, exc.message) from exc
        seasons = [s.model_dump() for s in data.seasons]
        return _store(session, data.name, "daily", "pu", data.year, values, seasons, "typical days", 0)
    expected = hours_in_year(data.year)
    if len(data.values) != expected:
        raise InvalidField("values", f"{data.year} has {expected} hours; {len(data.values)} values were sent.")
    return _store(session, data.name, "hourly", data.unit, data.year, np.asarray(data.values), None, "values sent", 0)


def list_load_shapes(session: Session) -> list[LoadShape]:
    return list(session.scalars(select(LoadShape).order_by(LoadShape.name)))


def get_load_shape(session: Session, shape_id: int) -> LoadShape:
    return get_or_404(session, LoadShape, shape_id, "Load shape")


def load_shape_out(shape: LoadShape) -> schemas.LoadShapeOut:
    return schemas.LoadShapeOut(
        id=shape.id, version=shape.version, name=shape.name, kind=shape.kind, unit=shape.unit, year=shape.year,
        source=shape.source, filled_hours=shape.filled_hours, hours=len(shape.values), peak=shape.peak,
        load_factor=shape.load_factor, loss_factor=shape.loss_factor, rms_pu=shape.rms_pu,
        equivalent_hours=shape.equivalent_hours, seasons=shape.seasons, created_at=shape.created_at,
    )


def load_shape_values(shape: LoadShape) -> schemas.LoadShapeValuesOut:
    return schemas.LoadShapeValuesOut(
        id=shape.id, unit=shape.unit, year=shape.year, values=shape.values,
        duration_curve=load_duration_curve(shape.values).tolist(),
    )


# --- import of a metered year --------------------------------------------------------------

def _number(cell: Any) -> float | None:
    """A float, None for a blank cell; raises ValueError for text."""
    if cell is None or (isinstance(cell, str) and not cell.strip()):
        return None
    if isinstance(cell, bool):
        raise ValueError
    value = float(cell.strip().replace(",", "") if isinstance(cell, str) else cell)
    if not math.isfinite(value):
        raise ValueError
    return value


def _timestamp(cell: Any) -> datetime:
    if isinstance(cell, datetime):
        return cell.replace(tzinfo=None)
    if isinstance(cell, date):
        return datetime(cell.year, cell.month, cell.day)
    text = str(cell).strip().replace("T", " ").rstrip("Z")
    return datetime.fromisoformat(text).replace(tzinfo=None)


class _Problems:
    def __init__(self) -> None:
        self.by_key: dict[tuple[str | None, str], list[int]] = {}

    def add(self, row: int, column: str | None, message: str) -> None:
        self.by_key.setdefault((column, message), []).append(row)

    def note(self, column: str | None, message: str) -> None:
        self.by_key.setdefault((column, message), [])

    def as_list(self) -> list[dict]:
        return [
            {"rows": rows[:1000], "column": column, "message": f"{message} ({rows_text(rows)})" if rows else message}
            for (column, message), rows in self.by_key.items()
        ]

    def __bool__(self) -> bool:
        return bool(self.by_key)


def import_load_shape(session: Session, name: str, filename: str, content: bytes, unit: str,
                      fill_gaps_up_to_hours: int = 0) -> LoadShape:
    """Import a year of hourly load from CSV or XLSX; all or nothing.

    Columns: ``timestamp`` (ISO date and hour), one of ``load``/``kw``/``kva``/``pu``,
    optional ``unit`` (the same on every row) and ``power_factor`` (for kW). Rows are
    numbered as in a spreadsheet, the header being row 1.
    """
    name = (name or "").strip()
    if not name:
        raise InvalidField("name", "give the load shape a name.")
    if unit not in UNITS:
        raise InvalidField("unit", "must be pu, kw or kva.")
    if not 0 <= fill_gaps_up_to_hours <= 24:
        raise InvalidField("fill_gaps_up_to_hours", "must be between 0 and 24 hours.")
    _name_free(session, name)
    header, rows = read_table(filename, content)
    problems = _Problems()
    if "timestamp" not in header:
        problems.note("timestamp", "the header has no 'timestamp' column")
    value_columns = [c for c in VALUE_COLUMNS if c in header]
    if len(value_columns) != 1:
        problems.note(None, "the header needs exactly one load column: load, kw, kva or pu"
                      + (f" (found {', '.join(value_columns)})" if value_columns else ""))
    if problems:
        raise ImportRefused("The file's header is not usable; nothing was stored.", problems.as_list())
    value_column = value_columns[0]
    if value_column != "load":
        unit = value_column
    t_col, v_col = header.index("timestamp"), header.index(value_column)
    u_col = header.index("unit") if "unit" in header else None
    pf_col = header.index("power_factor") if "power_factor" in header else None

    def cell(row: list, index: int | None) -> Any:
        return row[index] if index is not None and index < len(row) else None

    stamps: list[datetime | None] = []
    values: list[float] = []
    factors: list[float] = []
    row_units: dict[str, list[int]] = {}
    for number, row in enumerate(rows, start=2):
        try:
            stamps.append(_timestamp(cell(row, t_col)))
        except (TypeError, ValueError):
            stamps.append(None)
            problems.add(number, "timestamp", "not a date and hour such as 2026-01-01 13:00")
        try:
            value = _number(cell(row, v_col))
            if value is not None and value < 0:
                problems.add(number, value_column, "negative load")
            values.append(math.nan if value is None else value)
        except (TypeError, ValueError):
            values.append(math.nan)
            problems.add(number, value_column, "not a number")
        if u_col is not None:
            row_units.setdefault(str(cell(row, u_col) or "").strip().lower(), []).append(number)
        if pf_col is not None:
            try:
                pf = _number(cell(row, pf_col))
                if pf is None or not 0 < pf <= 1:
                    raise ValueError
                factors.append(pf)
            except (TypeError, ValueError):
                factors.append(1.0)
                problems.add(number, "power_factor", "power factor must lie in (0, 1]")
    if len(row_units) > 1:
        usual = max(row_units, key=lambda k: len(row_units[k]))
        odd = sorted(r for unit_name, rs in row_units.items() if unit_name != usual for r in rs)
        for r in odd:
            problems.add(r, "unit", f"mixed units: most rows are '{usual}'")
    elif row_units:
        only = next(iter(row_units))
        if only in UNITS:
            unit = only
        elif only:
            problems.note("unit", f"unit '{only}' is not pu, kw or kva")
    if problems:
        raise ImportRefused("Some rows cannot be read; nothing was stored.", problems.as_list())

    known = [s for s in stamps if s is not None]
    year = known[0].year
    expected = hours_in_year(year)
    start = datetime(year, 1, 1)
    series = np.full(expected, np.nan)
    seen: dict[int, int] = {}
    for number, (stamp, value) in enumerate(zip(stamps, values, strict=True), start=2):
        offset = (stamp - start) / timedelta(hours=1)
        if stamp.minute or stamp.second or not 0 <= offset < expected:
            problems.add(number, "timestamp", f"not an hour of {year}")
            continue
        hour = int(offset)
        if hour in seen:
            problems.add(number, "timestamp", "duplicate hour")
            problems.add(seen[hour], "timestamp", "duplicate hour")
            continue
        seen[hour] = number
        series[hour] = value
    if len(rows) != expected and not fill_gaps_up_to_hours:
        problems.note(None, f"the file has {len(rows)} data rows; a year of hourly values for {year} needs {expected}")
    if problems:
        raise ImportRefused("The timestamps do not make one year of hours; nothing was stored.", problems.as_list())

    if pf_col is not None and unit == "kw":
        pf_series = np.ones(expected)
        for (stamp, pf) in zip(stamps, factors, strict=True):
            pf_series[int((stamp - start) / timedelta(hours=1))] = pf
        series = apparent_power(series, pf_series)
        unit_note = "kW turned into kVA with the file's power factor"
    elif unit == "kw":
        unit_note = "kW taken as kVA (no power factor column: unity assumed)"
    else:
        unit_note = unit
    series, filled = fill_short_gaps(series, fill_gaps_up_to_hours)
    gaps = np.flatnonzero(np.isnan(series))
    if gaps.size:
        runs = np.split(gaps, np.flatnonzero(np.diff(gaps) > 1) + 1)
        described = ", ".join(
            f"{(start + timedelta(hours=int(r[0]))):%Y-%m-%d %H:00} for {len(r)} h" for r in runs[:10]
        )
        more = f" and {len(runs) - 10} more gaps" if len(runs) > 10 else ""
        limit = f"longer than {fill_gaps_up_to_hours} h or at the ends of the year" if fill_gaps_up_to_hours else "no filling chosen"
        raise ImportRefused(
            "Some hours have no value; nothing was stored.",
            [{"rows": [], "column": value_column, "message": f"missing hours ({limit}): {described}{more}"}],
        )
    stored_unit = "pu" if unit == "pu" else "kva"
    source = f"{filename}: {unit_note}" + (f"; {filled} h filled by interpolation" if filled else "")
    return _store(session, name, "hourly", stored_unit, year, series, None, source, filled)
