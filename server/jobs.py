"""Long work on a job queue: Monte Carlo runs, and any other work a person would otherwise wait
more than a second for.

One small interface, whichever engine holds the data:

- ``enqueue(session, kind, payload, owner)`` adds a job in the caller's transaction and returns
  its id; a worker gets it once that transaction commits, never before and never if it rolls back.
- ``get(session, job_id)`` reads it: ``status`` (one of STATUSES), ``progress`` (0 to 1, written
  in steps of PROGRESS_STEP), ``message`` (why it failed or was cancelled).
- ``request_cancel(session, job, username, is_admin)``: only the job's owner or an admin; a
  queued job is cancelled at once, a running one stops at its next check.
- ``make_runner(...)`` gives the worker loop: ``start``/``stop`` in the background of a web
  process, ``run`` in the foreground (``lossledger worker``). It runs at most ``concurrency``
  jobs at once.

The state of every job is a row of ``jobs`` on both engines. What carries a job to a worker:

- PostgreSQL: Procrastinate, in a schema of its own (QUEUE_SCHEMA, made by migration 0010). The
  job is deferred on the caller's own connection, inside the caller's transaction; worker
  processes take jobs with the library's row locks, run each on a thread of their own, and pass
  on its abort requests. Web processes run none unless ``jobs_in_web`` says so. The library's
  SQL (its functions and triggers too) names its tables without their schema: whatever touches
  them puts QUEUE_SCHEMA on its search path (``_on_queue_schema``, ``_pool_options``).
- SQLite (embedded, one host): a bounded pool of threads in the web process claims queued rows
  of ``jobs`` itself, woken as soon as a job is committed in the same process.

A handler is named per kind (HANDLERS). It is given a ``Work`` (payload, a progress callback, a
stop check) and returns a function that writes its result; that function is called in the
transaction that marks the job done. It raises Cancelled or Failed to end otherwise.

Workers are rows of ``job_workers`` (host, process id, heartbeat). A job whose worker is gone is
failed with a plain message (LOST): at once when the worker ran on this host and its process is
not there any more, otherwise once its heartbeat is older than ``job_worker_timeout_s``. Every
web process and worker checks when it starts and at each heartbeat, and a read of a running job
checks its worker; on PostgreSQL the library's own stalled-job detection fails the library's
side of such a job too. A worker stopped on purpose (a restart) puts its running jobs back in
the queue instead, from the start.
"""

from __future__ import annotations

import asyncio
import importlib
import logging
import math
import os
import signal
import socket
import threading
import time
import uuid
import weakref
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import delete, event, func, select, update
from sqlalchemy.orm import Session

from server.errors import Conflict, ServiceError
from server.settings import Settings, get_settings
from server.storage.database import Database
from server.storage.models import Job, JobWorker, utcnow

log = logging.getLogger("lossledger.jobs")

STATUSES = ("queued", "running", "done", "failed", "cancelled")
OPEN = ("queued", "running")
# Progress is written each time it passes another step: a person sees 5, 10, ... % without a
# write for every batch of draws.
PROGRESS_STEP = 0.05
# How often a running job reads its row for a cancel request (its stop check is called far
# more often than that).
CANCEL_CHECK_S = 0.5
# The Procrastinate schema, queue and task (PostgreSQL only).
QUEUE_SCHEMA = "lossledger_queue"
QUEUE = "lossledger"
TASK = "lossledger.run_job"

LOST = "The process running this stopped before it finished; start it again."
CANCELLED = "Cancelled on request."
REQUEUED = "Its worker was stopped for a restart; it waits for another worker and starts again from the beginning."

# Kind -> "module:function" of its handler, imported when a job of that kind first runs (so that
# this module imports no service), or the function itself (``register``).
HANDLERS: dict[str, str | Callable[[Work], Callable[[Session], None] | None]] = {
    "monte_carlo": "server.services.robustness:run_monte_carlo_job",
}

HOST = socket.gethostname()


class Cancelled(Exception):
    """Raised by a handler that stopped because its stop check said so."""


class Failed(Exception):
    """Raised by a handler that cannot finish; ``message`` is shown to the person as it is."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


class NotYours(ServiceError):
    """Cancelling a job someone else started, without the admin role."""

    status_code = 403


@dataclass
class Work:
    """What a handler is given: the job, and the callbacks that report on it."""

    job_id: int
    kind: str
    owner: str
    payload: dict[str, Any]
    database: Database
    # Fraction done, 0 to 1; written to the job in steps of PROGRESS_STEP.
    report: Callable[[float], None]
    # True once the job should stop (a cancel request, or its worker stopping).
    should_stop: Callable[[], bool]


def register(kind: str, handler: Callable[[Work], Callable[[Session], None] | None]) -> None:
    """Name ``handler`` as the one that runs jobs of ``kind``."""
    HANDLERS[kind] = handler


def _handler(kind: str) -> Callable[[Work], Callable[[Session], None] | None]:
    found = HANDLERS.get(kind)
    if found is None:
        raise Failed(f"No handler for jobs of kind {kind!r}.")
    if isinstance(found, str):
        module, _, name = found.partition(":")
        found = getattr(importlib.import_module(module), name)
    return found


def _aware(moment: datetime | None) -> datetime | None:
    # SQLite gives back times without their zone; they were written in UTC.
    return moment.replace(tzinfo=UTC) if moment is not None and moment.tzinfo is None else moment


def _postgres(session_or_database: Session | Database) -> bool:
    bind = (session_or_database.engine if isinstance(session_or_database, Database)
            else session_or_database.get_bind())
    return bind.dialect.name == "postgresql"


# --- the interface callers use ---------------------------------------------------------------------

def enqueue(session: Session, kind: str, payload: dict[str, Any], owner: str) -> int:
    """Add a job of ``kind`` for ``owner`` in the session's transaction and return its id. It is
    handed to a worker when the transaction commits. Refused (Conflict) when the owner already
    has ``max_open_jobs_per_person`` jobs waiting or running."""
    limit = get_settings().max_open_jobs_per_person
    held = session.scalar(select(func.count()).select_from(Job).where(Job.owner == owner, Job.status.in_(OPEN)))
    if held >= limit:
        raise Conflict(f"{owner} already has {held} runs waiting or running (at most {limit} at once); "
                       "wait for one to finish, or cancel one, then start this again.")
    job = Job(kind=kind, owner=owner, payload=dict(payload), status="queued", progress=0.0, cancel_requested=False,
              message="", created_at=utcnow())
    session.add(job)
    session.flush()
    if _postgres(session):
        _defer(session, job)
    else:
        event.listen(session, "after_commit", _wake_local_runners, once=True)
    return job.id


def get(session: Session, job_id: int) -> Job | None:
    """The job, its state checked: a running job whose worker is gone is failed now (``LOST``)."""
    job = session.get(Job, job_id)
    if job is not None:
        check_worker(session, job)
    return job


def check_worker(session: Session, job: Job) -> None:
    """Fail ``job`` (and commit) if it is running on a worker that is gone."""
    if job.status != "running":
        return
    worker = session.get(JobWorker, job.worker_id) if job.worker_id else None
    if worker is not None and not _is_gone(worker, utcnow(), get_settings().job_worker_timeout_s):
        return
    _fail_lost(session, [(job.id, job.worker_id)])
    session.commit()
    session.refresh(job)


def may_cancel(job: Job, username: str, is_admin: bool) -> bool:
    """Whether a person may cancel the job: its owner, or an admin."""
    return is_admin or username == job.owner


def request_cancel(session: Session, job: Job, username: str, is_admin: bool) -> Job:
    """Cancel ``job`` for ``username``: a queued job at once, a running one at its next check; a
    finished one keeps its state. Refused (NotYours, 403) for anyone but its owner or an admin.
    Commits."""
    if not may_cancel(job, username, is_admin):
        raise NotYours(f"Only {job.owner}, who started this, or an admin may cancel it.")
    check_worker(session, job)
    if job.status == "queued":
        job.status, job.message, job.finished_at = "cancelled", CANCELLED, utcnow()
        if job.queue_job_id is not None and _postgres(session):
            _cancel_queued(session, job.queue_job_id)
    elif job.status == "running":
        job.cancel_requested = True
    session.commit()
    return job


def ahead_of(session: Session, job: Job) -> int:
    """How many queued jobs will be taken before ``job`` (jobs are taken oldest first)."""
    return session.scalar(select(func.count()).select_from(Job).where(Job.status == "queued", Job.id < job.id)) or 0


# --- PostgreSQL: the queue library ----------------------------------------------------------------

_apps: dict[str, Any] = {}


def _queue_app(connector=None):
    """A Procrastinate app with our one task; without a connector, one that defers only on a
    connection it is given (the web processes' case: they open no pool of their own)."""
    import procrastinate

    app = procrastinate.App(connector=connector or procrastinate.PsycopgConnector())

    @app.task(name=TASK, queue=QUEUE, pass_context=True)
    def run_job(context: procrastinate.JobContext, job_id: int) -> None:
        runner: Runner = context.additional_context["runner"]
        runner.execute(job_id, abort=lambda: _abort_reason(context) or runner._abort())

    return app


def _abort_reason(context) -> str | None:
    reason = context.abort_reason()
    return None if reason is None else ("shutdown" if reason.value == "shutdown" else "cancel")


def _on_queue_schema(session: Session, action: Callable[[Any], Any]) -> Any:
    """Call ``action`` with the session's own driver connection, the queue schema first on its
    search path for the call only (the library's SQL names no schema)."""
    connection = session.connection().connection.driver_connection
    with connection.cursor() as cursor:
        previous = cursor.execute("SELECT current_setting('search_path')").fetchone()[0]
        cursor.execute("SELECT set_config('search_path', %s, true)", (f"{QUEUE_SCHEMA}, {previous}",))
        try:
            return action(connection)
        finally:
            cursor.execute("SELECT set_config('search_path', %s, true)", (previous,))


def _defer(session: Session, job: Job) -> None:
    app = _apps.get("defer") or _apps.setdefault("defer", _queue_app())
    job.queue_job_id = _on_queue_schema(
        session, lambda connection: app.tasks[TASK].configure(connection=connection).defer(job_id=job.id))


def _cancel_queued(session: Session, queue_job_id: int) -> None:
    # Deleted, not kept as cancelled: our row keeps the story. One a worker has just taken is
    # left alone; that worker finds our row cancelled and does nothing.
    app = _apps.get("defer") or _apps.setdefault("defer", _queue_app())
    _on_queue_schema(session, lambda connection: app.job_manager.cancel_job_by_id(
        queue_job_id, delete_job=True, connection=connection))


def _pool_options(database: Database, concurrency: int) -> dict[str, Any]:
    """The library's connection pool: the application's database, the queue schema on the path."""
    _args, options = database.engine.dialect.create_connect_args(database.engine.url)
    options.pop("context", None)  # SQLAlchemy's adapters are for its own connections
    path = f"-c search_path={QUEUE_SCHEMA}"
    options["options"] = f"{options['options']} {path}" if options.get("options") else path
    # One connection per running job's status write, and a few for fetching, heartbeats, aborts.
    return {"conninfo": "", "kwargs": options, "min_size": 1, "max_size": concurrency + 3}


# --- workers ---------------------------------------------------------------------------------------

# Worker ids alive in this process: another row with this process's id is an earlier process
# that had the same number (a restarted container reuses them).
_here: set[str] = set()
_local_runners: weakref.WeakSet[LocalRunner] = weakref.WeakSet()


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # someone else's process: it exists
    return True


def _is_gone(worker: JobWorker, now: datetime, timeout_s: float) -> bool:
    """Whether a worker no longer runs: on this host, its process is not there (or is this one
    under another worker id); anywhere, it has not said it is alive for ``timeout_s``."""
    if worker.id in _here:
        return False
    if worker.host == HOST and (worker.pid == os.getpid() or not _process_alive(worker.pid)):
        return True
    return now - _aware(worker.heartbeat_at) > timedelta(seconds=timeout_s)


def _fail_lost(session: Session, jobs: list[tuple[int, str | None]]) -> int:
    """Fail each (job id, worker id) still running on that worker; how many were failed."""
    now, failed = utcnow(), 0
    for job_id, worker_id in jobs:
        failed += session.execute(
            update(Job).where(Job.id == job_id, Job.status == "running", Job.worker_id == worker_id)
            .values(status="failed", message=LOST, finished_at=now)).rowcount
    return failed


def fail_orphans(database: Database, settings: Settings) -> int:
    """Fail every running job whose worker is gone, forget the workers that are gone, and say
    how many jobs were failed. Called when a web process or worker starts and at each heartbeat."""
    with database.session() as session:
        # Jobs first, workers second: a job claimed after the first read is not looked at, and
        # one claimed before it has its worker in the second read.
        running = session.execute(select(Job.id, Job.worker_id).where(Job.status == "running")).all()
        workers = session.scalars(select(JobWorker)).all()
        now = utcnow()
        gone = {w.id for w in workers if _is_gone(w, now, settings.job_worker_timeout_s)}
        alive = {w.id for w in workers} - gone
        failed = _fail_lost(session, [(job_id, worker) for job_id, worker in running if worker not in alive])
        if gone:
            session.execute(delete(JobWorker).where(JobWorker.id.in_(gone)))
        session.commit()
    if failed:
        log.warning("failed %d job(s) whose worker is gone", failed)
    return failed


def _progress_step(fraction: float, written: float) -> float | None:
    """The step to write for ``fraction`` done when ``written`` was written last, or None: the
    last whole PROGRESS_STEP reached, if it is past ``written`` and short of the end (the end is
    written with the job's final state)."""
    steps = math.floor(min(max(fraction, 0.0), 1.0) / PROGRESS_STEP + 1e-9)
    step = round(steps * PROGRESS_STEP, 6)
    return step if written < step < 1.0 else None


class Runner:
    """What runs jobs in one process: its worker row and heartbeat, and ``execute``, which runs
    one job start to finish. ``LocalRunner`` and ``QueueRunner`` say where the jobs come from."""

    def __init__(self, database: Database, settings: Settings, concurrency: int | None = None) -> None:
        self.database = database
        self.settings = settings
        self.concurrency = concurrency or settings.job_concurrency
        self.worker_id = f"{HOST[:40]}-{os.getpid()}-{uuid.uuid4().hex[:12]}"
        self._stopping = threading.Event()
        self._keeper: threading.Thread | None = None

    # The worker row and the heartbeat.

    def _register(self) -> None:
        _here.add(self.worker_id)
        now = utcnow()
        with self.database.session() as session:
            session.add(JobWorker(id=self.worker_id, host=HOST, pid=os.getpid(), started_at=now, heartbeat_at=now))
            session.commit()
        fail_orphans(self.database, self.settings)

    def _unregister(self) -> None:
        _here.discard(self.worker_id)
        try:
            with self.database.session() as session:
                session.execute(delete(JobWorker).where(JobWorker.id == self.worker_id))
                session.commit()
        except Exception:  # its row is then taken for a gone worker's by the next check
            log.warning("job worker %s could not remove its row", self.worker_id, exc_info=True)

    def _beat(self) -> None:
        with self.database.session() as session:
            now = utcnow()
            beat = update(JobWorker).where(JobWorker.id == self.worker_id).values(heartbeat_at=now)
            if not session.execute(beat).rowcount:
                # The row went (a restore, a test emptying the tables): this worker still runs.
                session.add(JobWorker(id=self.worker_id, host=HOST, pid=os.getpid(), started_at=now, heartbeat_at=now))
            session.commit()
        fail_orphans(self.database, self.settings)

    def _keep(self) -> None:
        while not self._stopping.wait(self.settings.job_heartbeat_s):
            try:
                self._beat()
            except Exception:  # a database that cannot be reached now may be back at the next beat
                log.warning("job worker heartbeat failed", exc_info=True)

    def _start_keeper(self) -> None:
        self._keeper = threading.Thread(target=self._keep, name=f"jobs-heartbeat-{self.worker_id}", daemon=True)
        self._keeper.start()

    # One job.

    def _abort(self) -> str | None:
        return "shutdown" if self._stopping.is_set() else None

    def execute(self, job_id: int, abort: Callable[[], str | None] | None = None) -> None:
        """Run job ``job_id`` if it is still queued (another worker, a cancel or a lost race may
        have taken it), reporting progress and heeding cancel requests, and record how it ended.
        ``abort`` gives "shutdown" when this worker is stopping, "cancel" when the queue asks."""
        abort = abort or self._abort
        with self.database.session() as session:
            claimed = session.execute(
                update(Job).where(Job.id == job_id, Job.status == "queued")
                .values(status="running", worker_id=self.worker_id, started_at=utcnow(), progress=0.0,
                        message="")).rowcount
            if not claimed:
                return
            job = session.get(Job, job_id)
            kind, owner, payload = job.kind, job.owner, dict(job.payload)
            session.commit()

        written = 0.0
        checked = {"at": -math.inf, "stop": False}

        def report(fraction: float) -> None:
            nonlocal written
            step = _progress_step(fraction, written)
            if step is None:
                return
            written = step
            with self.database.session() as s:
                s.execute(update(Job).where(Job.id == job_id, Job.status == "running").values(progress=step))
                s.commit()

        def should_stop() -> bool:
            if abort() is not None:
                return True
            now = time.monotonic()
            if now - checked["at"] >= CANCEL_CHECK_S:
                with self.database.session() as s:
                    row = s.execute(select(Job.cancel_requested, Job.status, Job.worker_id).where(Job.id == job_id)).first()
                # Stop on a cancel request, and when the job is no longer this worker's.
                checked["stop"] = row is None or row.cancel_requested or row.status != "running" \
                    or row.worker_id != self.worker_id
                checked["at"] = now
            return checked["stop"]

        work = Work(job_id, kind, owner, payload, self.database, report, should_stop)
        try:
            write = _handler(kind)(work)
        except Cancelled:
            # Stopped by this worker's own stop it goes back to the queue, unless its owner had
            # asked to cancel it anyway.
            if abort() == "shutdown" and not self._cancel_asked(job_id):
                self._requeue(job_id)
            else:
                self._finish(job_id, "cancelled", CANCELLED)
        except Failed as exc:
            self._finish(job_id, "failed", exc.message)
        except Exception as exc:  # a worker has no caller to raise to: the job says it failed
            log.exception("job %s (%s) failed", job_id, kind)
            self._finish(job_id, "failed", f"Unexpected error: {type(exc).__name__}.")
        else:
            self._finish(job_id, "done", "", write)

    def _finish(self, job_id: int, status: str, message: str, write: Callable[[Session], None] | None = None) -> None:
        """Record how the job ended, with its result in the same transaction, unless it is no
        longer this worker's (failed meanwhile as lost)."""
        values: dict[str, Any] = {"status": status, "message": message, "finished_at": utcnow()}
        if status == "done":
            values["progress"] = 1.0
        with self.database.session() as session:
            ended = session.execute(
                update(Job).where(Job.id == job_id, Job.status == "running", Job.worker_id == self.worker_id)
                .values(**values)).rowcount
            if not ended:
                log.warning("job %s ended as %s, but is no longer held by this worker", job_id, status)
                return
            if write is not None:
                write(session)
            session.commit()

    def _cancel_asked(self, job_id: int) -> bool:
        with self.database.session() as session:
            return bool(session.scalar(select(Job.cancel_requested).where(Job.id == job_id)))

    def _requeue(self, job_id: int) -> None:
        """Put a job this stopping worker was running back in the queue, from the beginning."""
        with self.database.session() as session:
            back = session.execute(
                update(Job).where(Job.id == job_id, Job.status == "running", Job.worker_id == self.worker_id)
                .values(status="queued", worker_id=None, started_at=None, progress=0.0, message=REQUEUED)).rowcount
            if back and _postgres(session):
                _defer(session, session.get(Job, job_id))
            session.commit()


class LocalRunner(Runner):
    """SQLite: ``concurrency`` threads in this process, each taking the oldest queued job."""

    def __init__(self, database: Database, settings: Settings, concurrency: int | None = None) -> None:
        super().__init__(database, settings, concurrency)
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []

    def wake(self) -> None:
        self._wake.set()

    def _next_queued(self) -> int | None:
        with self.database.session() as session:
            return session.scalar(select(Job.id).where(Job.status == "queued").order_by(Job.id).limit(1))

    def _loop(self) -> None:
        while not self._stopping.is_set():
            try:
                job_id = self._next_queued()
                if job_id is not None:
                    self.execute(job_id)
                    continue
            except Exception:  # the next look may succeed (a locked or restored database)
                log.warning("job runner could not take a job", exc_info=True)
            self._wake.wait(self.settings.job_poll_s)
            self._wake.clear()

    def start(self) -> None:
        """Register, fail the jobs of workers that are gone, and start the threads."""
        self._register()
        _local_runners.add(self)
        self._start_keeper()
        for number in range(self.concurrency):
            thread = threading.Thread(target=self._loop, name=f"jobs-{number}-{self.worker_id}", daemon=True)
            thread.start()
            self._threads.append(thread)

    def stop(self, timeout_s: float = 30.0) -> None:
        """Stop taking jobs; running ones stop at their next check and go back to the queue."""
        self._stopping.set()
        self._wake.set()
        deadline = time.monotonic() + timeout_s
        for thread in [*self._threads, *([self._keeper] if self._keeper else [])]:
            thread.join(max(0.0, deadline - time.monotonic()))
        _local_runners.discard(self)
        self._unregister()

    def run(self) -> None:
        """Run in the foreground until SIGINT or SIGTERM."""
        done = threading.Event()
        for sig in (signal.SIGINT, signal.SIGTERM):
            signal.signal(sig, lambda *_: done.set())
        self.start()
        try:
            done.wait()
        finally:
            self.stop()


def _wake_local_runners(_session: Session | None = None) -> None:
    for runner in list(_local_runners):
        runner.wake()


class QueueRunner(Runner):
    """PostgreSQL: a Procrastinate worker taking jobs of our queue, ``concurrency`` at once, each
    on a thread of its own."""

    def __init__(self, database: Database, settings: Settings, concurrency: int | None = None) -> None:
        super().__init__(database, settings, concurrency)
        import procrastinate

        self.app = _queue_app(procrastinate.PsycopgConnector(**_pool_options(database, self.concurrency)))
        self._loop: asyncio.AbstractEventLoop | None = None
        self._task: asyncio.Task | None = None
        self._thread: threading.Thread | None = None
        self._ready = threading.Event()

    def _worker_options(self) -> dict[str, Any]:
        return {
            "queues": [QUEUE], "concurrency": self.concurrency, "name": self.worker_id,
            "additional_context": {"runner": self},
            # Our own handlers stop the worker (they stop running jobs first, see stop).
            "install_signal_handlers": False,
            # Our jobs table keeps every job's story; the library's rows are only the carrier.
            "delete_jobs": "always",
            "update_heartbeat_interval": self.settings.job_heartbeat_s,
            "stalled_worker_timeout": self.settings.job_worker_timeout_s,
            "shutdown_graceful_timeout": 30.0,
        }

    async def _settle_stalled(self) -> None:
        """The library's stalled jobs (their worker stopped saying it is alive): our job is
        failed as lost, and the library's side is ended too."""
        from procrastinate.jobs import Status

        stalled = await self.app.job_manager.get_stalled_jobs(
            queue=QUEUE, seconds_since_heartbeat=self.settings.job_worker_timeout_s)
        for queued in stalled:
            job_id = int(queued.task_kwargs.get("job_id", 0))
            with self.database.session() as session:
                worker = session.scalar(select(Job.worker_id).where(Job.id == job_id))
                _fail_lost(session, [(job_id, worker)])
                session.commit()
            await self.app.job_manager.finish_job(queued, status=Status.FAILED, delete_job=True)

    async def _keep_async(self) -> None:
        while True:
            await asyncio.sleep(self.settings.job_heartbeat_s)
            try:
                await asyncio.to_thread(self._beat)
                await self._settle_stalled()
            except Exception:  # the next beat may reach the database again
                log.warning("job worker heartbeat failed", exc_info=True)

    async def _serve(self, handle_signals: bool) -> None:
        async with self.app.open_async():
            self._loop = asyncio.get_running_loop()
            await self._settle_stalled()
            self._task = asyncio.ensure_future(self.app.run_worker_async(**self._worker_options()))
            keeper = asyncio.ensure_future(self._keep_async())
            if handle_signals:
                for sig in (signal.SIGINT, signal.SIGTERM):
                    self._loop.add_signal_handler(sig, self._request_stop)
            self._ready.set()
            try:
                await self._task
            except asyncio.CancelledError:
                pass
            finally:
                keeper.cancel()

    def _request_stop(self) -> None:
        # Running jobs see the stop at their next check and go back to the queue; then the
        # worker is cancelled, which the library takes as a graceful stop.
        self._stopping.set()
        if self._task is not None:
            self._task.cancel()

    def start(self) -> None:
        """Run the worker on a thread of its own (a web process with ``jobs_in_web``, tests)."""
        self._register()

        def serve() -> None:
            try:
                asyncio.run(self._serve(handle_signals=False))
            except Exception:
                log.exception("job worker stopped on an error")
            finally:
                self._ready.set()

        self._thread = threading.Thread(target=serve, name=f"jobs-{self.worker_id}", daemon=True)
        self._thread.start()
        self._ready.wait(30)

    def stop(self, timeout_s: float = 30.0) -> None:
        self._stopping.set()
        if self._loop is not None and not self._loop.is_closed():
            try:
                self._loop.call_soon_threadsafe(self._request_stop)
            except RuntimeError:
                pass  # the loop closed meanwhile: the worker has stopped already
        if self._thread is not None:
            self._thread.join(timeout_s)
        self._unregister()

    def run(self) -> None:
        """Run in the foreground until SIGINT or SIGTERM."""
        self._register()
        try:
            asyncio.run(self._serve(handle_signals=True))
        finally:
            self._unregister()


def make_runner(database: Database, settings: Settings, concurrency: int | None = None) -> Runner:
    """The runner for the database's engine, running at most ``concurrency`` jobs at once
    (default ``job_concurrency``)."""
    runner = QueueRunner if _postgres(database) else LocalRunner
    return runner(database, settings, concurrency)


def start_for_web(database: Database, settings: Settings) -> Runner | None:
    """At a web process's start: fail the jobs of workers that are gone, and start a runner when
    this process runs jobs (``Settings.runs_jobs_in_web``). A database that cannot be reached
    now delays nothing: the readiness check says so."""
    try:
        fail_orphans(database, settings)
        if not settings.runs_jobs_in_web():
            return None
        runner = make_runner(database, settings)
        runner.start()
        return runner
    except Exception:
        log.warning("jobs were not started with this web process", exc_info=True)
        return None
