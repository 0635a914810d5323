"""Fleet import and summary at scale, measured side by side in one run.

Targets: importing 100,000 rows into SQLite within ten times the time the csv module
takes just to parse the same file; the fleet summary for 100,000 units in under a second.
Run: python -m bench.bench_fleet_import
"""

from __future__ import annotations

import csv
import io
import tempfile
import time
from pathlib import Path

import numpy as np

from server import schemas
from server.services import cost_bases, fleet
from server.storage.audit import Actor, set_actor
from server.storage.database import Database
from server.storage.migrate import upgrade

UNITS = 100_000
IMPORTS = 3


def inventory(n: int) -> bytes:
    rng = np.random.default_rng(7)
    ratings = rng.choice([50, 100, 160, 250, 400, 630, 1000], n)
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(fleet.COLUMNS)
    regions = ["North", "South", "East", "West", "Central"]
    for k in range(n):
        missing = k % 10 == 0  # one unit in ten without recorded losses: estimated
        writer.writerow([
            f"U{k:07d}", f"Site {k % 2000}", regions[k % 5], ratings[k], 3, "dry" if k % 7 == 0 else "liquid",
            1965 + k % 60, "" if missing else round(ratings[k] * 1.6, 1), "" if missing else round(ratings[k] * 12, 1),
            "", round(0.2 + (k % 90) / 100, 3), 0.3, "",
        ])
    return out.getvalue().encode()


def best(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


class Steps:
    """Seconds spent in each step of one import, timed in that same run by wrapping the service's
    functions (it looks them up in its module when it calls them)."""

    WRAPPED = {"parse_inventory": "read and check", "_write_units": "write", "commit": "commit"}

    def __init__(self) -> None:
        self.seconds = dict.fromkeys(["read", *self.WRAPPED.values()], 0.0)
        self.originals = {name: getattr(fleet, name) for name in [*self.WRAPPED, "read_table_chunks"]}

    def __enter__(self) -> Steps:
        for name, step in self.WRAPPED.items():
            setattr(fleet, name, self._timed(self.originals[name], step))
        fleet.read_table_chunks = self._timed_reading
        return self

    def __exit__(self, *_exc) -> None:
        for name, original in self.originals.items():
            setattr(fleet, name, original)

    def _timed(self, fn, step: str):
        def timed(*args, **kwargs):
            start = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                self.seconds[step] += time.perf_counter() - start
        return timed

    def _timed_reading(self, *args, **kwargs):
        """The file is read a chunk at a time, between the checks: time the reading of each."""
        header, chunks = self._timed(self.originals["read_table_chunks"], "read")(*args, **kwargs)
        return header, iter(self._timed(chunks.__next__, "read"), None)

    def text(self, total: float) -> str:
        s = self.seconds
        parts = {"read (decode, csv, drop empty rows)": s["read"], "check and estimate": s["read and check"] - s["read"],
                 "write": s["write"], "commit": s["commit"]}
        parts["other (existing ids, file row, audit)"] = total - sum(parts.values())
        return ", ".join(f"{name} {seconds:.3f} s" for name, seconds in parts.items())


def import_into_new_database(folder: str, name: str, content: bytes) -> tuple[float, Steps, Database]:
    url = f"sqlite:///{Path(folder) / name}"
    upgrade(url)
    db = Database(url)
    with Steps() as steps:
        start = time.perf_counter()
        with db.session() as session:
            set_actor(session, Actor("bench"))
            staged = fleet.stage_import(session, "fleet.csv", content, commit_now=True)
            assert staged.committed_at is not None, staged.summary["problems"][:3]
        imported = time.perf_counter() - start
    return imported, steps, db


def main() -> None:
    content = inventory(UNITS)
    parse = best(lambda: sum(1 for _ in csv.reader(io.StringIO(content.decode("utf-8")))))
    with tempfile.TemporaryDirectory() as folder:
        # The best of three, as for the parse; each is a first import, into a new database.
        runs = []
        for k in range(IMPORTS):
            imported, steps, db = import_into_new_database(folder, f"bench{k}.db", content)
            runs.append((imported, steps))
            if k < IMPORTS - 1:
                db.dispose()
        imported, steps = min(runs, key=lambda run: run[0])
        with db.session() as session:
            set_actor(session, Actor("bench"))
            basis = cost_bases.create_cost_basis(session, schemas.PresentWorthCostBasisCreate(
                name="Bench", currency="EUR", energy_price_per_kwh=0.1, capacity_cost_per_kw_year=50,
                discount_rate_pct=6, years=30, peak_load_pu=0.8, loss_factor=0.3))
            basis_id = basis.id

        def summary() -> None:
            with db.session() as session:
                fleet.fleet_summary(session, basis_id)

        summary_time = best(summary)
        db.dispose()
    print(f"fleet import, {UNITS:,} rows into SQLite (read, check, estimate, write; best of {IMPORTS}): "
          f"{imported:.2f} s; csv module parse alone {parse:.3f} s; ratio {imported / parse:.1f} (target <= 10)")
    print(f"  of which {steps.text(imported)}")
    print(f"  all {IMPORTS} imports: {', '.join(f'{run[0]:.2f} s' for run in runs)}")
    print(f"fleet summary, {UNITS:,} units (one query to arrays, vectorised costs): {summary_time:.3f} s "
          f"(target < 1 s)")


if __name__ == "__main__":
    main()
