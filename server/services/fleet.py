"""Use cases for the installed fleet: import the inventory, cost its losses, find units to
replace or resize. Whole-fleet work runs on numpy arrays read in one query, never on ORM
objects one by one."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date
from itertools import compress
from typing import Any

import numpy as np
from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from domain.errors import InvalidInput
from domain.fleet import (
    DEFAULT_TYPICAL_LOSSES,
    DRY,
    LIQUID,
    STANDARD_RATINGS_KVA,
    FleetArrays,
    TypicalLossRow,
    TypicalLossTable,
    annual_losses,
    estimate_losses,
    group_totals,
    limit_losses_by_rating,
    loading_findings,
    shortlist,
)
from server import schemas
from server.errors import Conflict, ImportRefused, InvalidField
from server.exports import write_csv
from server.services.common import commit, get_or_404, get_owned_or_404, unique_clash_is_conflict
from server.services.compliance import all_tables
from server.services.cost_bases import get_cost_basis, parse_inputs
from server.storage import audit, generation
from server.storage.models import AppDocument, FleetImport, FleetUnit, LoadShape, utcnow
from server.tabular import gc_paused, read_table_chunks, rows_text

TYPICAL_LOSSES_KEY = "typical-losses"
COLUMNS = ("asset_id", "site", "region", "rating_kva", "phases", "insulation", "year_installed",
           "no_load_loss_w", "load_loss_w", "peak_load_kva", "peak_load_pu", "loss_factor", "load_shape")
NUMERIC = ("rating_kva", "phases", "year_installed", "no_load_loss_w", "load_loss_w", "peak_load_kva",
           "peak_load_pu", "loss_factor")


# --- the typical-loss table (user-editable) ---------------------------------------------------

def typical_losses(session: Session) -> TypicalLossTable:
    doc = session.get(AppDocument, TYPICAL_LOSSES_KEY)
    if doc is None:
        return DEFAULT_TYPICAL_LOSSES
    value = doc.value
    return TypicalLossTable(value["name"], value["source"], tuple(TypicalLossRow(*r) for r in value["rows"]),
                            value.get("status", "user-defined"))


def typical_losses_out(table: TypicalLossTable) -> dict[str, Any]:
    return {"name": table.name, "source": table.source, "status": table.status,
            "columns": list(TypicalLossRow._fields), "rows": [list(r) for r in table.rows]}


def set_typical_losses(session: Session, name: str, source: str, rows: list[list[Any]]) -> TypicalLossTable:
    try:
        table = TypicalLossTable(name, source, tuple(TypicalLossRow(*r) for r in rows), "user-defined")
    except (InvalidInput, TypeError, ValueError) as exc:
        raise InvalidField("rows", str(exc)) from exc
    doc = session.get(AppDocument, TYPICAL_LOSSES_KEY)
    value = typical_losses_out(table)
    actor = audit.get_actor(session).username
    if doc is None:
        session.add(AppDocument(key=TYPICAL_LOSSES_KEY, value=value, updated_by=actor))
    else:
        doc.value, doc.version, doc.updated_at, doc.updated_by = value, doc.version + 1, utcnow(), actor
    audit.record(session, "update", "typical_losses", None, f"replaced the typical-loss table ({len(rows)} rows)")
    commit(session, "typical-loss table")
    return table


# --- inventory import -------------------------------------------------------------------------

@dataclass
class ParsedInventory:
    rows: int
    columns: dict[str, Any] = field(default_factory=dict)
    problems: list[dict] = field(default_factory=list)
    estimated_no_load: int = 0
    estimated_load: int = 0


class _Problems:
    def __init__(self) -> None:
        self.by_key: dict[tuple[str, str], list[int]] = {}

    def add_mask(self, column: str, message: str, mask: np.ndarray) -> None:
        rows = (np.flatnonzero(mask) + 2).tolist()
        if rows:
            self.by_key.setdefault((column, message), []).extend(rows)

    def add(self, column: str, message: str, rows: list[int]) -> None:
        if rows:
            self.by_key.setdefault((column, message), []).extend(rows)

    def as_list(self) -> list[dict]:
        return [{"rows": rows[:1000], "column": column, "message": f"{message} ({rows_text(sorted(rows))})"}
                for (column, message), rows in self.by_key.items()]


# The file is read a chunk of rows at a time and each chunk's columns are converted whole (numpy,
# sets, str methods mapped in C) while its cells are still in the processor's cache; the checks
# then run on whole columns. A loop over rows runs only to name the rows of a problem found.
_ROWS_PER_CHUNK = 500


def _numbers(values: Sequence[Any], first_row: int) -> tuple[np.ndarray, list[int]]:
    """Floats with NaN for blank (empty or None) cells, and the spreadsheet rows of cells that are
    not numbers, ``first_row`` being the row of the first cell."""
    try:
        return np.array(values, dtype=float), []  # the common case: every cell filled with a number
    except (TypeError, ValueError):
        pass
    if values.count("") == len(values):  # a column left empty
        return np.full(len(values), np.nan), []
    cells = np.array(values, dtype=object)
    cells[cells == ""] = math.nan  # None becomes NaN as it is
    try:
        return cells.astype(float), []  # float() of every cell in one call
    except (TypeError, ValueError):
        pass
    out = np.full(len(cells), np.nan)
    bad = []
    for k, value in enumerate(cells):
        try:
            out[k] = float(value)
        except (TypeError, ValueError):
            if not (isinstance(value, str) and not value.strip()):
                bad.append(first_row + k)
    return out, bad


def _texts(values: Sequence[Any], max_chars: int | None = None) -> list[str]:
    """Cells as stripped text ('' for a blank), cut to ``max_chars``."""
    try:
        texts = list(map(str.strip, values))  # CSV cells are all strings
    except TypeError:  # a workbook's numbers, dates and empty cells
        texts = ["" if v is None else str(v).strip() for v in values]
    if max_chars is not None and texts and max(map(len, texts)) > max_chars:
        texts = [t[:max_chars] for t in texts]
    return texts


class _Columns:
    """The file's columns, gathered a chunk of rows at a time: numbers as float arrays, text
    stripped, insulation as its names."""

    def __init__(self, header: list[str]) -> None:
        self.header = header
        self.rows = 0
        self.numbers: dict[str, list[np.ndarray]] = {c: [] for c in NUMERIC if c in header}
        self.not_numbers: dict[str, list[int]] = {c: [] for c in NUMERIC}
        self.texts: dict[str, list[str]] = {c: [] for c in ("site", "region") if c in header}
        self.asset_ids: list[str] = []
        self.distinct_ids: set[str] = set()
        self.longest_id = 0
        self.insulation: list[str] = []
        self.bad_insulation: list[int] = []
        self.load_shape: list[Any] = []
        self._insulation_of: dict[Any, str] = {}

    def add(self, rows: list[list[Any]]) -> None:
        width = len(self.header)
        try:
            columns = list(zip(*rows, strict=True))
        except ValueError:
            columns = []
        if len(columns) != width:  # rows shorter or longer than the header: pad or cut each one
            columns = list(zip(*[(list(r) + [None] * width)[:width] for r in rows], strict=True))
        cells = dict(zip(self.header, columns))
        first = self.rows + 2  # the spreadsheet row of the chunk's first row, the header being row 1
        for column, parts in self.numbers.items():
            values, bad = _numbers(cells[column], first)
            parts.append(values)
            self.not_numbers[column].extend(bad)
        self._add_asset_ids(cells["asset_id"])
        for column, texts in self.texts.items():
            texts.extend(_texts(cells[column], 120))
        if "insulation" in cells:
            self._add_insulation(cells["insulation"], first)
        if "load_shape" in cells:
            self.load_shape.extend(cells["load_shape"])
        self.rows += len(rows)

    def _add_asset_ids(self, values: Sequence[Any]) -> None:
        ids = _texts(values)
        # A spreadsheet gives a numeric id as a float (1234.0). One search of the joined ids spares
        # the usual file, which has none, a test of every id.
        if ".0\n" in "\n".join(ids) + "\n":
            ids = [a[:-2] if a.endswith(".0") and a[:-2].isdigit() else a for a in ids]
        self.asset_ids.extend(ids)
        self.distinct_ids.update(ids)
        self.longest_id = max(self.longest_id, max(map(len, ids)))

    def _add_insulation(self, values: Sequence[Any], first: int) -> None:
        name_of = self._insulation_of  # worked out once per distinct cell; blank is liquid
        distinct = set(values)
        for v in distinct.difference(name_of):
            name_of[v] = "liquid" if v in (None, "") else str(v).strip().lower()
        bad = {v for v in distinct if name_of[v] not in ("liquid", "dry")}
        if bad:
            self.bad_insulation.extend(first + k for k, v in enumerate(values) if v in bad)
        self.insulation.extend(map(name_of.__getitem__, values))


def _check_asset_ids(columns: _Columns, problems: _Problems) -> None:
    ids = columns.asset_ids
    if "" in columns.distinct_ids:
        problems.add("asset_id", "missing asset id", [k + 2 for k, a in enumerate(ids) if not a])
    if len(columns.distinct_ids) < len(ids):
        seen: set[str] = set()
        duplicates = []
        for k, a in enumerate(ids):
            if a in seen:
                duplicates.append(k + 2)
            else:
                seen.add(a)
        problems.add("asset_id", "asset id appears twice", duplicates)
    if columns.longest_id > 64:
        problems.add("asset_id", "longer than 64 characters", [k + 2 for k, a in enumerate(ids) if len(a) > 64])


_NO_SHAPE = -1
_UNKNOWN_SHAPE = -2


def _load_shapes(session: Session, values: list[Any], loss_factor: np.ndarray, problems: _Problems) -> np.ndarray:
    """Load shape ids of the rows that name a shape and give no loss factor (``_NO_SHAPE`` for the
    others); the shape's loss factor is filled into ``loss_factor``."""
    n = len(values)
    shape_ids = np.full(n, _NO_SHAPE, dtype=np.int64)
    names = set(values) - {None, ""}
    if not names:
        return shape_ids
    shapes = {name.casefold(): (shape_id, factor) for name, shape_id, factor
              in session.execute(select(LoadShape.name, LoadShape.id, LoadShape.loss_factor))}
    id_of: dict[Any, int] = {None: _NO_SHAPE, "": _NO_SHAPE}
    factor_of: dict[Any, float] = {None: math.nan, "": math.nan}
    for name in names:
        id_of[name], factor_of[name] = shapes.get(str(name).strip().casefold(), (_UNKNOWN_SHAPE, math.nan))
    if all(isinstance(name, str) for name in names):
        ids = np.fromiter(map(id_of.__getitem__, values), np.int64, n)
        factors = np.fromiter(map(factor_of.__getitem__, values), float, n)
    else:  # a workbook's 1 and 1.0 are one key of a dict but name different shapes
        found = [shapes.get(str(v).strip().casefold(), (_UNKNOWN_SHAPE, math.nan)) if v not in (None, "")
                 else (_NO_SHAPE, math.nan) for v in values]
        ids = np.array([f[0] for f in found], dtype=np.int64)
        factors = np.array([f[1] for f in found], dtype=float)
    wanted = np.isnan(loss_factor)
    problems.add_mask("load_shape", "no load shape of that name", wanted & (ids == _UNKNOWN_SHAPE))
    use = wanted & (ids >= 0)
    shape_ids[use] = ids[use]
    loss_factor[use] = factors[use]
    return shape_ids


def parse_inventory(session: Session, filename: str, content: bytes, default_loss_factor: float | None = None) -> ParsedInventory:
    """Read and check every row; estimate missing losses (flagged). Stores nothing."""
    with gc_paused():
        return _parse_inventory(session, filename, content, default_loss_factor)


def _parse_inventory(session: Session, filename: str, content: bytes, default_loss_factor: float | None) -> ParsedInventory:
    header, chunks = read_table_chunks(filename, content, _ROWS_PER_CHUNK)
    unknown = [c for c in header if c and c not in COLUMNS]
    missing = [c for c in ("asset_id", "rating_kva", "year_installed") if c not in header]
    if unknown or missing:
        raise ImportRefused(
            "The header does not match the fleet template; nothing was read.",
            [{"rows": [1], "column": c, "message": "unknown column"} for c in unknown]
            + [{"rows": [1], "column": c, "message": "required column missing"} for c in missing],
        )
    columns = _Columns(header)
    for chunk in chunks:
        columns.add(chunk)
    n = columns.rows
    problems = _Problems()
    num = {}
    for c in NUMERIC:
        num[c] = np.concatenate(columns.numbers[c]) if columns.numbers.get(c) else np.full(n, np.nan)
        problems.add(c, "not a number", columns.not_numbers[c])
        problems.add_mask(c, "not a finite number", np.isinf(num[c]))
    _check_asset_ids(columns, problems)

    rating = num["rating_kva"]
    problems.add_mask("rating_kva", "rating must be above 0 and at most 2,000,000 kVA", ~((rating > 0) & (rating <= 2e6)))
    phases = np.where(np.isnan(num["phases"]), 3, num["phases"])
    problems.add_mask("phases", "phases must be 1 or 3", ~np.isin(phases, (1, 3)))
    year = num["year_installed"]
    this_year = date.today().year
    problems.add_mask("year_installed", f"year must be between 1900 and {this_year}",
                      ~((year >= 1900) & (year <= this_year)))
    problems.add("insulation", "insulation must be liquid or dry", columns.bad_insulation)
    insulation_names = columns.insulation if "insulation" in header else ["liquid"] * n
    insulation = np.where(np.array(insulation_names, dtype=object) == "dry", DRY, LIQUID)
    for column in ("no_load_loss_w", "load_loss_w"):
        problems.add_mask(column, "loss must be 0 or more and at most 10 MW", (num[column] < 0) | (num[column] > 1e7))

    peak_pu = num["peak_load_pu"].copy()
    from_kva = np.isnan(peak_pu) & ~np.isnan(num["peak_load_kva"])
    with np.errstate(invalid="ignore", divide="ignore"):
        peak_pu[from_kva] = num["peak_load_kva"][from_kva] / rating[from_kva]
    problems.add_mask("peak_load_pu", "needs peak_load_pu or peak_load_kva", np.isnan(peak_pu))
    problems.add_mask("peak_load_pu", "peak loading must be between 0 and 5 pu", (peak_pu < 0) | (peak_pu > 5))

    loss_factor = num["loss_factor"].copy()
    if "load_shape" in header:
        shape_ids = _load_shapes(session, columns.load_shape, loss_factor, problems)
    else:
        shape_ids = np.full(n, _NO_SHAPE, dtype=np.int64)
    if default_loss_factor is not None:
        loss_factor = np.where(np.isnan(loss_factor), default_loss_factor, loss_factor)
    problems.add_mask("loss_factor", "needs loss_factor or a known load_shape", np.isnan(loss_factor))
    problems.add_mask("loss_factor", "loss factor must be between 0 and 1", (loss_factor < 0) | (loss_factor > 1))

    parsed = ParsedInventory(rows=n, problems=problems.as_list())
    if parsed.problems:
        return parsed
    table = typical_losses(session)
    p0, pk = num["no_load_loss_w"].copy(), num["load_loss_w"].copy()
    miss0, missk = np.isnan(p0), np.isnan(pk)
    if miss0.any() or missk.any():
        need = miss0 | missk
        try:
            est0, estk = estimate_losses(rating[need], year[need].astype(np.int64), insulation[need], table)
        except InvalidInput as exc:
            parsed.problems = [{"rows": [], "column": "no_load_loss_w", "message": f"cannot estimate: {exc.message}"}]
            return parsed
        p0[need] = np.where(miss0[need], est0, p0[need])
        pk[need] = np.where(missk[need], estk, pk[need])
    parsed.estimated_no_load, parsed.estimated_load = int(miss0.sum()), int(missk.sum())
    parsed.columns = {
        "asset_id": columns.asset_ids, "site": columns.texts.get("site", [""] * n),
        "region": columns.texts.get("region", [""] * n), "rating_kva": rating, "phases": phases.astype(int),
        "insulation": insulation_names, "year_installed": year.astype(int), "no_load_loss_w": p0,
        "load_loss_w": pk, "no_load_loss_estimated": miss0, "load_loss_estimated": missk, "peak_load_pu": peak_pu,
        "loss_factor": loss_factor, "load_shape_id": shape_ids,
    }
    return parsed


def _existing(session: Session) -> set[str]:
    """The asset ids already in the fleet, read through the driver's cursor (a re-import reads them all)."""
    cursor = session.connection().connection.driver_connection.cursor()
    try:
        cursor.execute("SELECT asset_id FROM fleet_units")
        return {asset_id for asset_id, in cursor.fetchall()}
    finally:
        cursor.close()


def _summary(parsed: ParsedInventory, existing: set[str]) -> dict[str, Any]:
    ids = parsed.columns.get("asset_id", [])
    updates = sum(map(existing.__contains__, ids)) if existing else 0
    return {"rows": parsed.rows, "problems": parsed.problems[:200], "problem_count": len(parsed.problems),
            "creates": len(ids) - updates, "updates": updates, "estimated_no_load": parsed.estimated_no_load,
            "estimated_load": parsed.estimated_load, "can_commit": not parsed.problems and parsed.rows > 0}


def stage_import(session: Session, filename: str, content: bytes, default_loss_factor: float | None = None,
                 commit_now: bool = False) -> FleetImport:
    """Check the file and keep it for a preview; with ``commit_now`` also write it when clean,
    the file and its units in one transaction."""
    parsed = parse_inventory(session, filename, content, default_loss_factor)
    existing = _existing(session)
    summary = _summary(parsed, existing) | {"default_loss_factor": default_loss_factor}
    staged = FleetImport(created_by=audit.get_actor(session).username, filename=(filename or "upload")[:200],
                         content=content, summary=summary)
    session.add(staged)
    if commit_now and summary["can_commit"]:
        with unique_clash_is_conflict(session, "fleet import"):
            _store(session, staged, parsed, existing)
    else:
        commit(session, "fleet import")
    return staged


def get_import(session: Session, import_id: int) -> FleetImport:
    """A staged import, for the user who uploaded it and administrators; 404 for anyone else."""
    return get_owned_or_404(session, FleetImport, import_id, "Fleet import")


def _committed_already(staged: FleetImport) -> Conflict:
    """409 carrying what the commit that went first did (the import's counts)."""
    return Conflict(f"Fleet import {staged.id} was committed already.",
                    current=import_out(staged).model_dump(mode="json"))


def commit_import(session: Session, import_id: int) -> FleetImport:
    """Write every row of a staged file (insert new assets, update known ones) in one
    transaction, or nothing; once only.

    The file is checked first (the slow part, holding no lock); then one conditional UPDATE
    marks the import committed in the transaction that writes the units. A second commit at
    the same moment waits on that row until the first ends, matches nothing and answers 409
    with the first one's result. A unique clash with units written meanwhile is 409 as well."""
    staged = get_import(session, import_id)
    if staged.committed_at is not None:
        raise _committed_already(staged)
    parsed = parse_inventory(session, staged.filename, staged.content, staged.summary.get("default_loss_factor"))
    if parsed.problems:
        raise ImportRefused("The file has problems; nothing was stored.", parsed.problems)
    generation.bump(session)  # its lock before the import's row's, the order every writer keeps
    claimed = session.execute(
        update(FleetImport).where(FleetImport.id == staged.id, FleetImport.committed_at.is_(None))
        .values(committed_at=utcnow()).execution_options(synchronize_session=False)
    ).rowcount
    if claimed != 1:
        session.rollback()
        raise _committed_already(get_or_404(session, FleetImport, staged.id, "Fleet import"))
    with unique_clash_is_conflict(session, "fleet import"):
        # The asset ids are read once the import is claimed: they include any commit's before it.
        _store(session, staged, parsed, _existing(session))
    return staged


def _store(session: Session, staged: FleetImport, parsed: ParsedInventory, existing: set[str]) -> None:
    """Write the units, mark the import committed and record it; one commit."""
    # Marked before the first flush, so that a new import's row (the whole file) is written once.
    staged.committed_at = utcnow()
    session.flush()  # the import's id, for the audit record
    with gc_paused():
        inserted, updated = _write_units(session, parsed, existing)
    audit.record(session, "import", "fleet", staged.id,
                 f"imported {inserted} new and {updated} updated fleet units from {staged.filename}")
    commit(session, "fleet import")


_UNIT_COLUMNS = ("asset_id", "site", "region", "rating_kva", "phases", "insulation", "year_installed",
                 "no_load_loss_w", "load_loss_w", "no_load_loss_estimated", "load_loss_estimated", "peak_load_pu",
                 "loss_factor", "load_shape_id", "version", "updated_at")


def _write_units(session: Session, parsed: ParsedInventory, existing: set[str]) -> tuple[int, int]:
    cols = parsed.columns
    n = len(cols["asset_id"])
    sqlite = session.connection().dialect.name == "sqlite"
    # sqlite3 binds ints, floats and strings as they are but looks for an adapter for every bool.
    flag = np.int64 if sqlite else bool
    shapes = cols["load_shape_id"]
    now = utcnow()
    # SQLite keeps times as text; converting once saves the driver's adapter a call per row.
    stamp = now.replace(tzinfo=None).isoformat(" ", "microseconds") if sqlite else now
    values = [
        cols["asset_id"], cols["site"], cols["region"], cols["rating_kva"].tolist(), cols["phases"].tolist(),
        cols["insulation"], cols["year_installed"].tolist(), cols["no_load_loss_w"].tolist(),
        cols["load_loss_w"].tolist(), cols["no_load_loss_estimated"].astype(flag).tolist(),
        cols["load_loss_estimated"].astype(flag).tolist(), cols["peak_load_pu"].tolist(), cols["loss_factor"].tolist(),
        [None] * n if (shapes == _NO_SHAPE).all() else np.where(shapes == _NO_SHAPE, None, shapes).tolist(),
        [1] * n, [stamp] * n,
    ]
    known = list(map(existing.__contains__, cols["asset_id"])) if existing else []
    if any(known):
        new = [not k for k in known]
        inserts = [list(compress(v, new)) for v in values]
        updates = [list(compress(v, known)) for v in values]
    else:
        inserts, updates = values, [[] for _ in values]
    bulk_write(session, _UNIT_COLUMNS, inserts, updates)
    return len(inserts[0]), len(updates[0])


_ROWS_PER_INSERT = 200  # on SQLite; anything from 50 to 800 takes the same time


def bulk_write(session: Session, columns: tuple[str, ...], inserts: list[list], updates: list[list]) -> None:
    """Insert new units and update known ones (keyed by asset_id, the first column) through the
    driver, inside the session's transaction: the ORM's per-row work would cost many times the
    database's own. ``inserts`` and ``updates`` hold one list per column; an update adds one to
    the unit's version.

    New units go in with COPY on PostgreSQL and, on SQLite, with INSERTs of a few hundred rows
    each, which take about half the time of one INSERT per row. Known units are updated with
    one UPDATE each on SQLite, and on PostgreSQL from a temporary table filled by COPY.
    """
    # The ORM's hooks never see these rows: move the data version here, before the first row
    # is written (the order every writer takes its locks in).
    generation.bump(session)
    connection = session.connection()
    cursor = connection.connection.driver_connection.cursor()
    try:
        if inserts and inserts[0]:
            if connection.dialect.name == "sqlite":
                _insert_sqlite(cursor, columns, inserts)
            else:
                _insert_copy(cursor, columns, inserts)
        if updates and updates[0]:
            changed = [(c, v) for c, v in zip(columns, updates, strict=True) if c != "version"]
            if connection.dialect.name == "sqlite":
                _update_sqlite(cursor, changed)
            else:
                _update_copy(cursor, changed)
    finally:
        cursor.close()


def _insert_sqlite(cursor: Any, columns: tuple[str, ...], values: list[list]) -> None:
    # A column with no value in any row is left out (NULL): binding None costs an adapter look-up.
    kept = [(c, v) for c, v in zip(columns, values, strict=True) if not (v[0] is None and v.count(None) == len(v))]
    width = len(kept)
    flat: list[Any] = [None] * (len(kept[0][1]) * width)
    for j, (_, v) in enumerate(kept):
        flat[j::width] = v
    head = f"INSERT INTO fleet_units ({', '.join(c for c, _ in kept)}) VALUES "
    row = "(" + ", ".join(["?"] * width) + ")"
    full = head + ", ".join([row] * _ROWS_PER_INSERT)
    step = width * _ROWS_PER_INSERT
    for start in range(0, len(flat), step):
        chunk = flat[start:start + step]
        cursor.execute(full if len(chunk) == step else head + ", ".join([row] * (len(chunk) // width)), chunk)


def _insert_copy(cursor: Any, columns: tuple[str, ...], values: list[list]) -> None:
    with cursor.copy(f"COPY fleet_units ({', '.join(columns)}) FROM STDIN") as copy:
        for row in zip(*values, strict=True):
            copy.write_row(row)


def _update_sqlite(cursor: Any, changed: list[tuple[str, list]]) -> None:
    assignments = ", ".join(f"{c} = ?" for c, _ in changed[1:])
    cursor.executemany(f"UPDATE fleet_units SET {assignments}, version = version + 1 WHERE asset_id = ?",
                       list(zip(*[v for _, v in changed[1:]], changed[0][1], strict=True)))


def _update_copy(cursor: Any, changed: list[tuple[str, list]]) -> None:
    # The new values go into a temporary table by COPY and then into the units with one UPDATE:
    # many times faster on PostgreSQL than an UPDATE per unit.
    names = [c for c, _ in changed]
    cursor.execute(f"CREATE TEMPORARY TABLE fleet_unit_updates ON COMMIT DROP AS "
                   f"SELECT {', '.join(names)} FROM fleet_units WITH NO DATA")
    with cursor.copy(f"COPY fleet_unit_updates ({', '.join(names)}) FROM STDIN") as copy:
        for row in zip(*[v for _, v in changed], strict=True):
            copy.write_row(row)
    assignments = ", ".join(f"{c} = u.{c}" for c in names[1:])
    cursor.execute(f"UPDATE fleet_units SET {assignments}, version = fleet_units.version + 1 "
                   "FROM fleet_unit_updates u WHERE fleet_units.asset_id = u.asset_id")


def import_out(staged: FleetImport) -> schemas.FleetImportOut:
    return schemas.FleetImportOut(id=staged.id, filename=staged.filename, created_by=staged.created_by,
                                  created_at=staged.created_at, committed_at=staged.committed_at, **{
                                      k: staged.summary[k] for k in ("rows", "problems", "problem_count", "creates",
                                                                     "updates", "estimated_no_load", "estimated_load",
                                                                     "can_commit")})


# --- single units ------------------------------------------------------------------------------

def create_unit(session: Session, data: schemas.FleetUnitCreate) -> FleetUnit:
    if session.scalar(select(FleetUnit.id).where(FleetUnit.asset_id == data.asset_id)) is not None:
        raise InvalidField("asset_id", f"asset {data.asset_id} is already in the fleet.")
    p0, pk = data.no_load_loss_w, data.load_loss_w
    if p0 is None or pk is None:
        code = DRY if data.insulation == "dry" else LIQUID
        est0, estk = estimate_losses(data.rating_kva, data.year_installed, code, typical_losses(session))
    peak = data.peak_load_pu if data.peak_load_pu is not None else data.peak_load_kva / data.rating_kva
    if peak > 5:  # the import's limit; a unit beyond it would stop every fleet-wide calculation
        raise InvalidField("peak_load_kva", "peak loading must be between 0 and 5 pu of the rating.")
    unit = FleetUnit(
        asset_id=data.asset_id, site=data.site, region=data.region, rating_kva=data.rating_kva, phases=data.phases,
        insulation=data.insulation, year_installed=data.year_installed,
        no_load_loss_w=p0 if p0 is not None else float(est0), load_loss_w=pk if pk is not None else float(estk),
        no_load_loss_estimated=p0 is None, load_loss_estimated=pk is None, peak_load_pu=peak,
        loss_factor=data.loss_factor,
    )
    session.add(unit)
    audit.record(session, "create", "fleet_unit", None, f"added fleet unit {data.asset_id}")
    commit(session, "fleet unit", unique_field="asset_id")
    return unit


def list_units(session: Session, region: str | None = None, site: str | None = None, offset: int = 0,
               limit: int = 100) -> tuple[int, list[FleetUnit]]:
    query = select(FleetUnit)
    count = select(func.count()).select_from(FleetUnit)
    for column, value in ((FleetUnit.region, region), (FleetUnit.site, site)):
        if value:
            query, count = query.where(column == value), count.where(column == value)
    units = session.scalars(query.order_by(FleetUnit.asset_id).offset(offset).limit(limit)).all()
    return session.scalar(count), list(units)


def unit_out(u: FleetUnit) -> schemas.FleetUnitOut:
    return schemas.FleetUnitOut.model_validate(u, from_attributes=True)


# --- whole-fleet arrays and costs --------------------------------------------------------------

@dataclass
class FleetData:
    arrays: FleetArrays
    asset_id: list[str]
    region: list[str]
    site: list[str]


def load_fleet(session: Session, region: str | None = None) -> FleetData:
    """All units as arrays, read in one query."""
    sql = ("SELECT asset_id, region, site, rating_kva, phases, insulation, year_installed, no_load_loss_w, "
           "load_loss_w, peak_load_pu, loss_factor, no_load_loss_estimated, load_loss_estimated FROM fleet_units")
    connection = session.connection()
    mark = "?" if connection.dialect.paramstyle == "qmark" else "%s"
    cursor = connection.connection.driver_connection.cursor()
    try:
        # The driver's cursor: the ORM's row objects would cost more than the arithmetic.
        if region:
            cursor.execute(sql + f" WHERE region = {mark} ORDER BY id", (region,))
        else:
            cursor.execute(sql + " ORDER BY id")
        rows = cursor.fetchall()
    finally:
        cursor.close()
    columns = list(zip(*rows, strict=True)) if rows else [()] * 13
    arrays = FleetArrays(
        rating_kva=np.asarray(columns[3], dtype=float), phases=np.asarray(columns[4], dtype=np.int64),
        insulation=(np.asarray(columns[5], dtype=object) == "dry").astype(np.int64),
        year_installed=np.asarray(columns[6], dtype=np.int64), no_load_loss_w=np.asarray(columns[7], dtype=float),
        load_loss_w=np.asarray(columns[8], dtype=float), peak_load_pu=np.asarray(columns[9], dtype=float),
        loss_factor=np.asarray(columns[10], dtype=float), estimated_no_load=np.asarray(columns[11], dtype=bool),
        estimated_load=np.asarray(columns[12], dtype=bool),
    )
    return FleetData(arrays, list(columns[0]), list(columns[1]), list(columns[2]))


@dataclass(frozen=True)
class EnergyTerms:
    energy_price_per_kwh: float
    capacity_cost_per_kw_year: float
    responsibility_factor: float
    carbon_price_per_t: float
    emission_factor_t_per_mwh: float
    discount_rate: float | None
    energy_escalation: float
    load_growth: float


def energy_terms(session: Session, cost_basis_id: int) -> EnergyTerms:
    """The first-year prices a fleet costing needs, from a cost basis's latest revision."""
    basis = get_cost_basis(session, cost_basis_id)
    revision = basis.latest
    inputs = parse_inputs({**revision.inputs, "method": revision.method})
    if revision.method == "present_worth":
        price = inputs.energy_price_path_per_kwh[0] if inputs.energy_price_path_per_kwh else inputs.energy_price_per_kwh
        return EnergyTerms(price, inputs.capacity_cost_per_kw_year, inputs.responsibility_factor,
                           inputs.carbon_price_per_t, inputs.emission_factor_t_per_mwh, inputs.discount_rate_pct / 100,
                           inputs.energy_escalation_pct / 100, inputs.load_growth_pct / 100)
    if revision.method == "fixed_charge_rate":
        return EnergyTerms(inputs.energy_cost_per_kwh, inputs.system_capacity_cost_per_kw_year,
                           inputs.responsibility_factor, inputs.carbon_price_per_t, inputs.emission_factor_t_per_mwh,
                           None, 0.0, 0.0)
    raise InvalidField("cost_basis_id", f"cost basis '{basis.name}' gives its rates directly and has no energy price; "
                       "choose a present-worth or fixed-charge-rate basis.")


def _annual(data: FleetData, terms: EnergyTerms) -> dict[str, np.ndarray]:
    return annual_losses(data.arrays, terms.energy_price_per_kwh, terms.capacity_cost_per_kw_year,
                         terms.responsibility_factor, terms.carbon_price_per_t, terms.emission_factor_t_per_mwh)


def fleet_summary(session: Session, cost_basis_id: int, region: str | None = None) -> schemas.FleetSummaryOut:
    terms = energy_terms(session, cost_basis_id)
    data = load_fleet(session, region)
    values = _annual(data, terms)
    a = data.arrays
    return schemas.FleetSummaryOut(
        units=len(a.rating_kva), cost_basis_id=cost_basis_id,
        no_load_energy_kwh_per_year=float(values["no_load_energy_kwh"].sum()),
        load_energy_kwh_per_year=float(values["load_energy_kwh"].sum()),
        loss_cost_per_year=float(values["loss_cost"].sum()), co2_t_per_year=float(values["co2_t"].sum()),
        units_with_estimated_losses=int((a.estimated_no_load | a.estimated_load).sum()),
    )


GROUPINGS = ("region", "site", "rating", "vintage", "insulation")


def _group_keys(data: FleetData, by: str) -> tuple[np.ndarray, list[str]]:
    if by in ("region", "site"):
        labels = getattr(data, by)
        names, keys = np.unique(np.asarray(labels, dtype=object).astype(str), return_inverse=True)
        return keys, [n or "(none)" for n in names.tolist()]
    if by == "rating":
        names, keys = np.unique(data.arrays.rating_kva, return_inverse=True)
        return keys, [f"{v:g} kVA" for v in names]
    if by == "vintage":
        decades = (data.arrays.year_installed // 10) * 10
        names, keys = np.unique(decades, return_inverse=True)
        return keys, [f"{d}s" for d in names]
    if by == "insulation":
        names, keys = np.unique(data.arrays.insulation, return_inverse=True)
        return keys, ["dry" if v == DRY else "liquid" for v in names]
    raise InvalidField("by", f"group by one of {', '.join(GROUPINGS)}.")


def fleet_groups(session: Session, cost_basis_id: int, by: str) -> schemas.FleetGroupsOut:
    terms = energy_terms(session, cost_basis_id)
    data = load_fleet(session)
    keys, labels = _group_keys(data, by)
    values = _annual(data, terms)
    values["estimated"] = (data.arrays.estimated_no_load | data.arrays.estimated_load).astype(float)
    totals = group_totals(values, keys, len(labels)) if len(keys) else {k: np.zeros(0) for k in (*values, "units")}
    rows = [
        schemas.FleetGroupOut(
            group=labels[g], units=int(totals["units"][g]), no_load_energy_kwh_per_year=float(totals["no_load_energy_kwh"][g]),
            load_energy_kwh_per_year=float(totals["load_energy_kwh"][g]), loss_cost_per_year=float(totals["loss_cost"][g]),
            co2_t_per_year=float(totals["co2_t"][g]), units_with_estimated_losses=int(totals["estimated"][g]),
        )
        for g in range(len(labels))
    ]
    rows.sort(key=lambda r: r.loss_cost_per_year, reverse=True)
    return schemas.FleetGroupsOut(by=by, cost_basis_id=cost_basis_id, groups=rows)


def fleet_loading(session: Session, max_loading_pu: float, min_loading_pu: float, limit: int = 200) -> schemas.FleetLoadingOut:
    data = load_fleet(session)
    try:
        found = loading_findings(data.arrays.peak_load_pu, max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu)
    except InvalidInput as exc:  # e.g. a lower limit above the upper one
        raise InvalidField(exc.field, exc.message) from exc

    def listed(mask: np.ndarray, descending: bool) -> list[schemas.FleetUnitBrief]:
        idx = np.flatnonzero(mask)
        order = np.argsort(data.arrays.peak_load_pu[idx])
        idx = idx[order[::-1] if descending else order][:limit]
        return [schemas.FleetUnitBrief(asset_id=data.asset_id[k], region=data.region[k], site=data.site[k],
                                       rating_kva=float(data.arrays.rating_kva[k]),
                                       peak_load_pu=float(data.arrays.peak_load_pu[k])) for k in idx]

    return schemas.FleetLoadingOut(
        max_loading_pu=max_loading_pu, min_loading_pu=min_loading_pu, overloaded_count=int(found.overloaded.sum()),
        oversized_count=int(found.oversized.sum()), overloaded=listed(found.overloaded, True),
        oversized=listed(found.oversized, False),
    )


# --- replacement shortlist --------------------------------------------------------------------

def _candidate_losses(session: Session, request: schemas.ShortlistIn, ratings: np.ndarray):
    if request.candidate == "limit_table":
        tables = [t for t in all_tables(session) if t.key == request.limit_table and t.kind == "max_losses"]
        if not tables:
            raise InvalidField("limit_table", f"no maximum-loss table with key '{request.limit_table}'.")
        by_insulation = {t.insulation: limit_losses_by_rating(t, ratings) for t in tables}
        p0 = np.vstack([by_insulation.get(name, (np.full(len(ratings), np.nan),) * 2)[0] for name in ("liquid", "dry")])
        pk = np.vstack([by_insulation.get(name, (np.full(len(ratings), np.nan),) * 2)[1] for name in ("liquid", "dry")])
        return p0, pk, f"a unit just meeting {tables[0].name}"
    # Winning offers of awarded lots, by rating.
    from server.services.locks import active_record
    from server.storage.models import EvaluationRecord, Lot

    p0 = np.full((2, len(ratings)), np.nan)
    pk = np.full((2, len(ratings)), np.nan)
    records = session.scalars(select(EvaluationRecord).where(EvaluationRecord.reopened_at.is_(None))).all()
    for record in records:
        lot = session.get(Lot, record.lot_id)
        if lot is None or active_record(session, lot.id) is None:
            continue
        offer = next(o for o in record.inputs["offers"] if o["id"] == record.awarded_offer_id)
        where = np.flatnonzero(np.isclose(ratings, lot.rating_kva))
        row = 1 if lot.insulation == "dry" else 0
        for j in where:
            p0[row, j], pk[row, j] = offer["no_load_loss_w"], offer["load_loss_w"]
    if np.isnan(p0).all():
        raise InvalidField("candidate", "no awarded lot yet: award a lot, or compare with a limit table.")
    return p0, pk, "the winning offers of awarded lots with a matching rating"


def fleet_shortlist(session: Session, request: schemas.ShortlistIn) -> tuple[schemas.ShortlistOut, FleetData, Any]:
    terms = energy_terms(session, request.cost_basis_id)
    discount = request.discount_rate_pct / 100 if request.discount_rate_pct is not None else terms.discount_rate
    if discount is None:
        raise InvalidField("discount_rate_pct", "this cost basis has no discount rate; give one.")
    data = load_fleet(session, request.region)
    ratings = np.asarray(STANDARD_RATINGS_KVA, dtype=float)
    p0, pk, candidate_label = _candidate_losses(session, request, ratings)
    cost = np.array([request.replacement_cost_per_kva * r + request.replacement_cost_fixed for r in ratings])
    try:
        result = shortlist(
            data.arrays, energy_price_per_kwh=terms.energy_price_per_kwh,
            capacity_cost_per_kw_year=terms.capacity_cost_per_kw_year,
            responsibility_factor=terms.responsibility_factor, discount_rate=discount,
            reference_year=request.reference_year or date.today().year,
            service_life_years=request.service_life_years, sizing_years=request.sizing_years,
            energy_escalation=terms.energy_escalation, load_growth=request.load_growth_pct / 100,
            max_loading_pu=request.max_loading_pu, standard_ratings_kva=ratings,
            no_load_loss_w_by_rating=p0, load_loss_w_by_rating=pk, replacement_cost_by_rating=cost,
            installation_cost=request.installation_cost, salvage_value=request.salvage_value,
            carbon_price_per_t=terms.carbon_price_per_t, emission_factor_t_per_mwh=terms.emission_factor_t_per_mwh,
        )
    except InvalidInput as exc:
        raise InvalidField(exc.field, exc.message) from exc
    npv = result.npv
    positive = np.isfinite(npv) & (npv > request.min_npv)
    order = [k for k in result.order.tolist() if positive[k]]
    est = data.arrays.estimated_no_load | data.arrays.estimated_load
    rows = [
        schemas.ShortlistRowOut(
            asset_id=data.asset_id[k], region=data.region[k], site=data.site[k],
            rating_kva=float(data.arrays.rating_kva[k]), year_installed=int(data.arrays.year_installed[k]),
            peak_load_pu=float(data.arrays.peak_load_pu[k]), losses_estimated=bool(est[k]),
            right_sized_rating_kva=float(result.right_sized_rating_kva[k]),
            candidate_no_load_loss_w=float(result.candidate_no_load_loss_w[k]),
            candidate_load_loss_w=float(result.candidate_load_loss_w[k]),
            annual_saving=float(result.annual_saving[k]), co2_saving_t=float(result.co2_saving_t[k]),
            remaining_life_years=float(result.remaining_life_years[k]), net_cost=float(result.net_cost[k]),
            npv=float(npv[k]), simple_payback_years=_finite(result.simple_payback_years[k]),
        )
        for k in order[: request.limit]
    ]
    chosen = np.asarray(order, dtype=np.int64)
    out = schemas.ShortlistOut(
        cost_basis_id=request.cost_basis_id, candidate=candidate_label, units_evaluated=len(npv),
        units_on_shortlist=len(order), programme_cost=float(result.net_cost[chosen].sum()) if len(chosen) else 0.0,
        programme_annual_saving=float(result.annual_saving[chosen].sum()) if len(chosen) else 0.0,
        programme_co2_saving_t=float(result.co2_saving_t[chosen].sum()) if len(chosen) else 0.0,
        programme_npv=float(npv[chosen].sum()) if len(chosen) else 0.0, rows=rows,
    )
    return out, data, result


def _finite(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


SHORTLIST_COLUMNS = ("asset_id", "region", "site", "rating_kva", "year_installed", "peak_load_pu", "losses_estimated",
                     "right_sized_rating_kva", "candidate_no_load_loss_w", "candidate_load_loss_w", "annual_saving",
                     "co2_saving_t", "remaining_life_years", "net_cost", "npv", "simple_payback_years")


def shortlist_csv(out: schemas.ShortlistOut) -> str:
    rows = []
    for row in out.rows:
        values = row.model_dump()
        values["losses_estimated"] = "estimated" if row.losses_estimated else "given"
        rows.append([("" if values[c] is None else values[c]) for c in SHORTLIST_COLUMNS])
    return write_csv(SHORTLIST_COLUMNS, rows)


UNIT_CSV_COLUMNS = ("asset_id", "region", "site", "rating_kva", "year_installed", "no_load_loss_w",
                    "no_load_loss_source", "load_loss_w", "load_loss_source", "peak_load_pu", "loss_factor",
                    "no_load_energy_kwh", "load_energy_kwh", "loss_cost", "co2_t")


def units_csv(session: Session, cost_basis_id: int) -> str:
    """Every unit with its annual losses; estimated losses say so."""
    terms = energy_terms(session, cost_basis_id)
    data = load_fleet(session)
    v = _annual(data, terms)
    a = data.arrays
    rows = zip(
        data.asset_id, data.region, data.site, a.rating_kva.tolist(), a.year_installed.tolist(),
        a.no_load_loss_w.tolist(), np.where(a.estimated_no_load, "estimated", "given").tolist(),
        a.load_loss_w.tolist(), np.where(a.estimated_load, "estimated", "given").tolist(), a.peak_load_pu.tolist(),
        a.loss_factor.tolist(), np.round(v["no_load_energy_kwh"], 3).tolist(), np.round(v["load_energy_kwh"], 3).tolist(),
        np.round(v["loss_cost"], 2).tolist(), np.round(v["co2_t"], 6).tolist(), strict=True,
    )
    return write_csv(UNIT_CSV_COLUMNS, rows)


TEMPLATE = write_csv(COLUMNS, [["T-0001", "Example substation", "North", 400, 3, "liquid", 2004, 610, 4800, "", 0.72,
                                 0.3, ""]])
