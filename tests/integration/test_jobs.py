"""The job queue (server/jobs.py) on both engines: a job runs to its result, progress moves in
steps, cancels are the owner's or an admin's, a worker that dies or is stopped leaves no job
"running", and a runner never runs more jobs at once than it is given."""

from __future__ import annotations

import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import timedelta
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import text

from server import jobs
from server.app import create_app
from server.settings import Settings
from server.storage.database import Database
from server.storage.models import Job, JobWorker, utcnow
from tests import factories as f
from tests.conftest import auth

REPO = Path(__file__).resolve().parents[2]
OFFERS = [("Lean", 12000, 300, 4000), ("Lossy", 10000, 650, 4200), ("Middle", 11000, 450, 4300)]


# --- helpers -------------------------------------------------------------------------------------

def purge_queue(url: str) -> None:
    """Empty the queue library's tables (PostgreSQL): the test fixtures empty only ours, and a
    job deferred by an earlier test would otherwise reach this test's worker."""
    if not url.startswith("postgresql"):
        return
    database = Database(url)
    try:
        with database.engine.begin() as conn:
            # The library's triggers name its tables without their schema.
            conn.execute(text(f"SET LOCAL search_path TO {jobs.QUEUE_SCHEMA}"))
            conn.execute(text(f"DELETE FROM {jobs.QUEUE_SCHEMA}.procrastinate_jobs"))
            conn.execute(text(f"DELETE FROM {jobs.QUEUE_SCHEMA}.procrastinate_workers"))
    finally:
        database.dispose()


@contextmanager
def app_client(url: str, user: str = "tester", **settings) -> Iterator[TestClient]:
    """An API client as ``user`` of an app made with ``settings`` (``jobs_in_web`` says whether it
    runs jobs itself, on either engine)."""
    purge_queue(url)
    with TestClient(create_app(Settings(database_url=url, env="test", **settings))) as client:
        client.headers.update(auth(user))
        yield client


def wait_for(condition: Callable[[], object], what: str, deadline_s: float = 60.0):
    """Poll ``condition`` until it is true and return it; fail saying ``what`` did not happen."""
    deadline = time.monotonic() + deadline_s
    while True:
        found = condition()
        if found:
            return found
        if time.monotonic() > deadline:
            pytest.fail(f"{what} did not happen within {deadline_s} s")
        time.sleep(0.02)


def make_lot(client) -> int:
    """A present-worth lot with three compliant offers, made as ``tester``."""
    tester = auth("tester")
    basis_id = client.post("/api/v1/cost-bases", json=f.present_worth_basis(), headers=tester).json()["id"]
    created = client.post("/api/v1/tenders", json=f.tender(basis_id, reference=f"J-{basis_id}"), headers=tester)
    lot_id = created.json()["lots"][0]["id"]
    for bidder, price, p0, pk in OFFERS:
        response = client.post(f"/api/v1/lots/{lot_id}/offers", headers=tester, json=f.offer(
            bidder=bidder, unit_price=price, no_load_loss_w=p0, load_loss_w=pk))
        assert response.status_code == 201, response.text
    return lot_id


def statuses(database: Database, ids: list[int]) -> list[str]:
    with database.session() as session:
        return [session.get(Job, job_id).status for job_id in ids]


def queue(database: Database, kind: str, count: int = 1, owner: str = "tester") -> list[int]:
    with database.session() as session:
        ids = [jobs.enqueue(session, kind, {"n": n}, f"{owner}{n}") for n in range(count)]
        session.commit()
    return ids


class Gate:
    """A handler that holds each job until ``release`` is set (or its stop check says stop),
    counting how many it holds at once."""

    def __init__(self) -> None:
        self.lock = threading.Lock()
        self.holding = 0
        self.most = 0
        self.release = threading.Event()

    def __call__(self, work: jobs.Work):
        with self.lock:
            self.holding += 1
            self.most = max(self.most, self.holding)
        try:
            while not self.release.wait(0.02):
                if work.should_stop():
                    raise jobs.Cancelled
        finally:
            with self.lock:
                self.holding -= 1
        return None


@pytest.fixture
def database(db_url) -> Iterator[Database]:
    purge_queue(db_url)
    db = Database(db_url)
    yield db
    db.dispose()


# --- a run goes through the queue to its result ----------------------------------------------------

def test_a_queued_run_is_taken_by_a_worker_and_ends_with_its_result(db_url):
    with app_client(db_url, jobs_in_web=True) as client:
        lot_id = make_lot(client)
        started = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 50_000, "seed": 5})
        assert started.status_code == 202 and started.json()["status"] in {"queued", "running", "done"}
        run_id = started.json()["id"]
        state = wait_for(lambda: (s := client.get(f"/api/v1/monte-carlo-runs/{run_id}").json())["status"]
                         not in jobs.OPEN and s, "the run finishing")
        assert state["status"] == "done" and state["progress"] == 1.0 and state["message"] == ""
        assert state["started_at"] and state["finished_at"] and len(state["result"]["rows"]) == 3
        # The same request computed while waiting gives the same figures: the queue changes nothing.
        direct = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": 20_000, "seed": 5}).json()
        assert direct["leader_offer_id"] == state["result"]["leader_offer_id"]


def test_a_web_process_on_postgresql_runs_no_job_unless_told(db_url):
    runs_here = db_url.startswith("sqlite")
    with app_client(db_url) as client:
        assert (client.app.state.jobs is not None) is runs_here
    with app_client(db_url, jobs_in_web=False) as client:
        assert client.app.state.jobs is None


# --- progress --------------------------------------------------------------------------------------

def test_progress_is_written_in_steps_of_five_percent(database):
    seen: list[float] = []

    def creep(work: jobs.Work):
        for n in range(1, 401):
            work.report(n / 400)
            with database.session() as session:
                progress = session.get(Job, work.job_id).progress
            if not seen or seen[-1] != progress:
                seen.append(progress)
        return None

    jobs.register("creep", creep)
    runner = jobs.Runner(database, Settings(database_url=database.url, env="test"))
    runner._register()
    [job_id] = queue(database, "creep")
    runner.execute(job_id)
    # 0, 5 %, ..., 95 %: one write per step, whatever the number of reports; the end comes with "done".
    assert seen == [pytest.approx(k / 20) for k in range(20)]
    with database.session() as session:
        job = session.get(Job, job_id)
        assert (job.status, job.progress) == ("done", 1.0)


def test_a_monte_carlo_run_reports_several_steps_before_its_end(db_url, monkeypatch):
    seen: list[float] = []
    real = jobs._handler("monte_carlo")

    def watched(work: jobs.Work):
        report = work.report

        def recorded(fraction: float) -> None:
            report(fraction)
            with work.database.session() as session:
                progress = session.get(Job, work.job_id).progress
            if not seen or seen[-1] != progress:
                seen.append(progress)

        work.report = recorded
        return real(work)

    monkeypatch.setitem(jobs.HANDLERS, "monte_carlo", watched)
    with app_client(db_url, jobs_in_web=False) as client:
        lot_id = make_lot(client)
        run = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 200_000, "seed": 2}).json()
        assert run["status"] == "queued" and run["progress"] == 0.0
        runner = jobs.Runner(client.app.state.db, client.app.state.settings)
        runner._register()
        with client.app.state.db.session() as session:
            job_id = session.execute(text("SELECT job_id FROM monte_carlo_runs WHERE id = :id"), {"id": run["id"]}).scalar()
        runner.execute(job_id)
        done = client.get(f"/api/v1/monte-carlo-runs/{run['id']}").json()
    assert done["status"] == "done" and done["progress"] == 1.0
    steps = [value for value in seen if 0 < value < 1]
    assert len(steps) >= 3, seen  # a person sees it move, not 0 % until the end
    assert steps == sorted(set(steps)) and all(abs(v * 20 - round(v * 20)) < 1e-9 for v in steps), seen


# --- cancelling ------------------------------------------------------------------------------------

def test_a_queued_run_is_cancelled_at_once_by_its_owner_or_an_admin_and_refused_for_others(db_url):
    with app_client(db_url, user="viewer", jobs_in_web=False) as client:
        lot_id = make_lot(client)
        owner_run = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1000}).json()
        second = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1000}).json()
        assert owner_run["created_by"] == "viewer" and owner_run["status"] == "queued"

        refused = client.post(f"/api/v1/monte-carlo-runs/{owner_run['id']}/cancel", headers=auth("buyer"))
        assert refused.status_code == 403
        assert "Only viewer, who started this, or an admin may cancel it" in refused.json()["detail"]
        assert client.get(f"/api/v1/monte-carlo-runs/{owner_run['id']}").json()["status"] == "queued"

        mine = client.post(f"/api/v1/monte-carlo-runs/{owner_run['id']}/cancel").json()
        assert mine["status"] == "cancelled" and mine["message"] == jobs.CANCELLED
        by_admin = client.post(f"/api/v1/monte-carlo-runs/{second['id']}/cancel", headers=auth("admin")).json()
        assert by_admin["status"] == "cancelled"
        # A finished run keeps its state, and is still refused to others.
        again = client.post(f"/api/v1/monte-carlo-runs/{owner_run['id']}/cancel")
        assert again.status_code == 200 and again.json()["status"] == "cancelled"
        assert client.post(f"/api/v1/monte-carlo-runs/{owner_run['id']}/cancel",
                           headers=auth("planner")).status_code == 403
        if db_url.startswith("postgresql"):
            with client.app.state.db.engine.connect() as conn:
                left = conn.execute(text(f"SELECT status FROM {jobs.QUEUE_SCHEMA}.procrastinate_jobs")).scalars().all()
            assert left == []  # no worker will take them


def test_a_running_run_stops_when_its_owner_cancels_it(db_url, monkeypatch):
    gate = Gate()
    monkeypatch.setitem(jobs.HANDLERS, "monte_carlo", gate)
    with app_client(db_url, user="viewer", jobs_in_web=True) as client:
        lot_id = make_lot(client)
        run_id = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1000}).json()["id"]
        wait_for(lambda: client.get(f"/api/v1/monte-carlo-runs/{run_id}").json()["status"] == "running",
                 "the run starting")
        asked = client.post(f"/api/v1/monte-carlo-runs/{run_id}/cancel").json()
        assert asked["cancel_requested"] is True and asked["status"] in {"running", "cancelled"}
        final = wait_for(lambda: (s := client.get(f"/api/v1/monte-carlo-runs/{run_id}").json())["status"]
                         not in jobs.OPEN and s, "the run stopping")
    assert final["status"] == "cancelled" and final["message"] == jobs.CANCELLED and final["result"] is None


def test_one_person_may_have_only_so_many_runs_waiting(db_url):
    with app_client(db_url, user="viewer", jobs_in_web=False) as client:
        lot_id = make_lot(client)
        limit = client.app.state.settings.max_open_jobs_per_person
        for _ in range(limit):
            assert client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 100}).status_code == 202
        refused = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 100})
        assert refused.status_code == 409 and "cancel one" in refused.json()["detail"]
        # Someone else is not held back by it.
        assert client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 100},
                           headers=auth("buyer")).status_code == 202


# --- restarts --------------------------------------------------------------------------------------

HOLDING_WORKER = '''
import sys, time
from server import jobs
from server.settings import Settings
from server.storage.database import Database


def hold(work):
    while not work.should_stop():  # until this process is killed
        time.sleep(0.05)
    raise jobs.Cancelled


jobs.register("monte_carlo", hold)
url = sys.argv[1]
jobs.make_runner(Database(url), Settings(database_url=url, env="test"), 1).run()
'''


def test_a_run_whose_worker_was_killed_is_failed_when_a_process_starts_never_left_running(db_url, tmp_path):
    script = tmp_path / "holding_worker.py"
    script.write_text(HOLDING_WORKER)
    with app_client(db_url, jobs_in_web=False) as client:
        lot_id = make_lot(client)
        run_id = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1000}).json()["id"]
        worker = subprocess.Popen([sys.executable, str(script), db_url], cwd=REPO,
                                  stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        try:
            wait_for(lambda: worker.poll() is not None
                     or client.get(f"/api/v1/monte-carlo-runs/{run_id}").json()["status"] == "running",
                     "the worker taking the run")
            assert worker.poll() is None, worker.stderr.read().decode()
        finally:
            worker.kill()  # no chance to say anything: as a crash or an out-of-memory kill
            worker.wait()
    with app_client(db_url, jobs_in_web=False) as restarted:
        state = restarted.get(f"/api/v1/monte-carlo-runs/{run_id}").json()
        assert state["status"] == "failed" and state["message"] == jobs.LOST
        if db_url.startswith("postgresql"):
            # The library's side of it: its stalled-job detection ends it once the dead worker's
            # heartbeat is old, as a worker started now sees.
            quick = Settings(database_url=db_url, env="test", job_heartbeat_s=0.2, job_worker_timeout_s=0.5)
            runner = jobs.make_runner(restarted.app.state.db, quick, 1)
            runner.start()
            try:
                def doing() -> int:
                    with restarted.app.state.db.engine.connect() as conn:
                        return conn.execute(text(f"SELECT count(*) FROM {jobs.QUEUE_SCHEMA}.procrastinate_jobs "
                                                 "WHERE status = 'doing'")).scalar()
                wait_for(lambda: doing() == 0, "the stalled library job being ended")
            finally:
                runner.stop()


def test_a_worker_gone_from_this_host_or_silent_elsewhere_has_its_jobs_failed_at_start_up(db_url, database):
    # A process that has exited: its number is free now.
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    ids = queue(database, "anything", 3)
    with database.session() as session:
        session.add_all([
            JobWorker(id="dead-here", host=jobs.HOST, pid=gone.pid, started_at=utcnow(), heartbeat_at=utcnow()),
            JobWorker(id="silent-elsewhere", host="another-host", pid=1, started_at=utcnow(),
                      heartbeat_at=utcnow() - timedelta(hours=1)),
            JobWorker(id="alive-elsewhere", host="another-host", pid=2, started_at=utcnow(), heartbeat_at=utcnow()),
        ])
        for job_id, worker in zip(ids, ("dead-here", "silent-elsewhere", "alive-elsewhere"), strict=True):
            job = session.get(Job, job_id)
            job.status, job.worker_id, job.started_at = "running", worker, utcnow()
        session.commit()
    with app_client(database.url, jobs_in_web=False):
        pass  # a web process starting
    assert statuses(database, ids) == ["failed", "failed", "running"]
    with database.session() as session:
        assert session.get(Job, ids[0]).message == jobs.LOST
        assert {w.id for w in session.query(JobWorker)} == {"alive-elsewhere"}


def test_a_worker_stopped_for_a_restart_puts_its_running_job_back_in_the_queue(database):
    gate = Gate()
    jobs.register("gate", gate)
    settings = Settings(database_url=database.url, env="test", job_poll_s=0.05)
    runner = jobs.make_runner(database, settings, 1)
    runner.start()
    try:
        [job_id] = queue(database, "gate")
        wait_for(lambda: statuses(database, [job_id]) == ["running"], "the job starting")
    finally:
        runner.stop()
    with database.session() as session:
        job = session.get(Job, job_id)
        assert (job.status, job.worker_id, job.progress, job.message) == ("queued", None, 0.0, jobs.REQUEUED)
    # The next worker takes it and finishes it.
    gate.release.set()
    again = jobs.make_runner(database, settings, 1)
    again.start()
    try:
        wait_for(lambda: statuses(database, [job_id]) == ["done"], "the job finishing on the next worker")
    finally:
        again.stop()


# --- bounded ---------------------------------------------------------------------------------------

def test_a_runner_never_runs_more_jobs_at_once_than_its_concurrency(database):
    gate = Gate()
    jobs.register("gate", gate)
    concurrency = 2
    settings = Settings(database_url=database.url, env="test", job_poll_s=0.05)
    runner = jobs.make_runner(database, settings, concurrency)
    runner.start()
    try:
        ids = queue(database, "gate", concurrency + 1)
        wait_for(lambda: statuses(database, ids).count("running") == concurrency, "two jobs starting")
        # Time for a third to start if the bound did not hold (the runner looks every 0.05 s and is
        # woken by each job committed); it must still be waiting.
        time.sleep(1.0)
        assert sorted(statuses(database, ids)) == ["queued", "running", "running"]
        assert gate.most == concurrency
        gate.release.set()
        wait_for(lambda: statuses(database, ids) == ["done"] * len(ids), "every job finishing")
    finally:
        gate.release.set()
        runner.stop()
    assert gate.most == concurrency
