"""Long work on a job queue (Monte Carlo runs and other work over about a second).

On both engines: ``jobs`` (what to do, for whom, how far it has got) and ``job_workers`` (the
processes running jobs, with their heartbeats); each Monte Carlo run moves its state onto a job
of its own. On PostgreSQL also the queue library's tables, in a schema of their own.

Revision ID: 0010
Revises: 0009
Create Date: 2026-12-02 17:00:00

"""
from collections.abc import Sequence
from pathlib import Path

import sqlalchemy as sa
from alembic import op

revision: str = '0010'
down_revision: str | Sequence[str] | None = '0009'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# The queue library's tables live apart from the application's, so that nothing that walks the
# application's tables (the model comparison, a TRUNCATE of every table) has to know about them,
# and under a name of ours, so that no other user of the library in the same database meets them.
QUEUE_SCHEMA = 'lossledger_queue'
# The library's own schema, for the version pyproject.toml pins, kept unchanged beside the
# migrations: this revision then makes the same tables whichever version is installed later.
# An upgrade of the library brings its SQL migrations in a revision of its own.
QUEUE_SQL = Path(__file__).resolve().parents[1] / 'vendor' / 'procrastinate-3.10.0-schema.sql'
# What a run that was running when the schema changed says: no process runs it any more.
LOST = 'The process running this stopped before it finished; start it again.'


def upgrade() -> None:
    bind = op.get_bind()
    postgres = bind.dialect.name == 'postgresql'
    op.create_table(
        'jobs',
        sa.Column('id', sa.Integer(), nullable=False),
        sa.Column('kind', sa.String(length=32), nullable=False),
        sa.Column('owner', sa.String(length=64), nullable=False),
        sa.Column('payload', sa.JSON(), nullable=False),
        sa.Column('status', sa.String(length=16), nullable=False),
        sa.Column('progress', sa.Float(), nullable=False),
        sa.Column('cancel_requested', sa.Boolean(), nullable=False),
        sa.Column('message', sa.Text(), nullable=False),
        sa.Column('worker_id', sa.String(length=64), nullable=True),
        sa.Column('queue_job_id', sa.BigInteger(), nullable=True),
        sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
        sa.Column('started_at', sa.DateTime(timezone=True), nullable=True),
        sa.Column('finished_at', sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_jobs')),
    )
    with op.batch_alter_table('jobs', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_jobs_owner'), ['owner'], unique=False)
        batch_op.create_index(batch_op.f('ix_jobs_status'), ['status'], unique=False)
    op.create_table(
        'job_workers',
        sa.Column('id', sa.String(length=64), nullable=False),
        sa.Column('host', sa.String(length=255), nullable=False),
        sa.Column('pid', sa.Integer(), nullable=False),
        sa.Column('started_at', sa.DateTime(timezone=True), nullable=False),
        sa.Column('heartbeat_at', sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_job_workers')),
    )

    # Each run gets a job with the run's id and state. A run still "running" lost its thread
    # with the process that is being upgraded, so it is failed and says so.
    payload = "json_build_object('lot_id', lot_id)" if postgres else "json_object('lot_id', lot_id)"
    bind.execute(sa.text(
        "INSERT INTO jobs (id, kind, owner, payload, status, progress, cancel_requested, message, created_at) "
        f"SELECT id, 'monte_carlo', created_by, {payload}, "
        "CASE WHEN status = 'running' THEN 'failed' ELSE status END, progress, cancel_requested, "
        "CASE WHEN status = 'running' THEN :lost ELSE message END, created_at FROM monte_carlo_runs"
    ), {'lost': LOST})
    if postgres:
        # Ids were given above; the next job must not take one of them.
        bind.execute(sa.text(
            "SELECT setval(pg_get_serial_sequence('jobs', 'id'), COALESCE((SELECT MAX(id) FROM jobs), 0) + 1, false)"))
    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.add_column(sa.Column('job_id', sa.Integer(), nullable=True))
    bind.execute(sa.text('UPDATE monte_carlo_runs SET job_id = id'))
    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.alter_column('job_id', existing_type=sa.Integer(), nullable=False)
        batch_op.create_unique_constraint(batch_op.f('uq_monte_carlo_runs_job_id'), ['job_id'])
        batch_op.create_foreign_key(batch_op.f('fk_monte_carlo_runs_job_id_jobs'), 'jobs', ['job_id'], ['id'])
        batch_op.drop_column('status')
        batch_op.drop_column('progress')
        batch_op.drop_column('cancel_requested')
        batch_op.drop_column('message')

    if postgres:
        # A queue schema left from an earlier install of this revision, whose application
        # tables were since dropped, holds jobs for rows that no longer exist: it is made anew.
        bind.exec_driver_sql(f'DROP SCHEMA IF EXISTS {QUEUE_SCHEMA} CASCADE')
        bind.exec_driver_sql(f'CREATE SCHEMA {QUEUE_SCHEMA}')
        # The library's SQL names no schema: it goes where the search path points, for this
        # transaction only. It is one script of many statements, with percent signs in its
        # messages: sent on the driver's own cursor without parameters, as a script is.
        bind.exec_driver_sql(f'SET LOCAL search_path TO {QUEUE_SCHEMA}')
        cursor = bind.connection.dbapi_connection.cursor()
        try:
            cursor.execute(QUEUE_SQL.read_text(encoding='utf-8'))
        finally:
            cursor.close()
        bind.exec_driver_sql('SET LOCAL search_path TO DEFAULT')


def downgrade() -> None:
    bind = op.get_bind()
    if bind.dialect.name == 'postgresql':
        bind.exec_driver_sql(f'DROP SCHEMA IF EXISTS {QUEUE_SCHEMA} CASCADE')

    # The runs take their state back from their jobs; one not finished has no process to finish it.
    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.add_column(sa.Column('status', sa.String(length=16), nullable=True))
        batch_op.add_column(sa.Column('progress', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('cancel_requested', sa.Boolean(), nullable=True))
        batch_op.add_column(sa.Column('message', sa.Text(), nullable=True))
    job = 'FROM jobs WHERE jobs.id = monte_carlo_runs.job_id'
    unfinished = "jobs.status IN ('queued', 'running')"
    bind.execute(sa.text(
        f"UPDATE monte_carlo_runs SET "
        f"status = (SELECT CASE WHEN {unfinished} THEN 'failed' ELSE jobs.status END {job}), "
        f"progress = (SELECT jobs.progress {job}), "
        f"cancel_requested = (SELECT jobs.cancel_requested {job}), "
        f"message = (SELECT CASE WHEN {unfinished} THEN :lost ELSE jobs.message END {job})"
    ), {'lost': LOST})
    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.alter_column('status', existing_type=sa.String(length=16), nullable=False)
        batch_op.alter_column('progress', existing_type=sa.Float(), nullable=False)
        batch_op.alter_column('cancel_requested', existing_type=sa.Boolean(), nullable=False)
        batch_op.alter_column('message', existing_type=sa.Text(), nullable=False)
        batch_op.drop_constraint(batch_op.f('fk_monte_carlo_runs_job_id_jobs'), type_='foreignkey')
        batch_op.drop_constraint(batch_op.f('uq_monte_carlo_runs_job_id'), type_='unique')
        batch_op.drop_column('job_id')

    op.drop_table('job_workers')
    with op.batch_alter_table('jobs', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_jobs_status'))
        batch_op.drop_index(batch_op.f('ix_jobs_owner'))
    op.drop_table('jobs')
