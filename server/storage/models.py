"""SQLAlchemy models. The schema itself is made only by the Alembic migrations."""

from __future__ import annotations

from datetime import UTC, date, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    Boolean,
    CheckConstraint,
    Date,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship, validates

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    return datetime.now(UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


class Versioned:
    """Optimistic locking: every UPDATE checks and bumps ``version``."""

    version: Mapped[int] = mapped_column(Integer, nullable=False, default=1)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    updated_at: Mapped[datetime] = mapped_column(
        DateTime(timezone=True), default=utcnow, onupdate=utcnow, nullable=False
    )


class CostBasis(Versioned, Base):
    __tablename__ = "cost_bases"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(120), nullable=False, unique=True)
    currency: Mapped[str] = mapped_column(String(3), nullable=False)
    revisions: Mapped[list[CostBasisRevision]] = relationship(
        back_populates="cost_basis", order_by="CostBasisRevision.revision", cascade="all, delete-orphan"
    )

    @property
    def latest(self) -> CostBasisRevision:
        return self.revisions[-1]


class CostBasisRevision(Base):
    """An immutable set of inputs and the rates derived from them."""

    __tablename__ = "cost_basis_revisions"
    __table_args__ = (UniqueConstraint("cost_basis_id", "revision"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    cost_basis_id: Mapped[int] = mapped_column(ForeignKey("cost_bases.id", ondelete="CASCADE"), nullable=False)
    revision: Mapped[int] = mapped_column(Integer, nullable=False)
    method: Mapped[str] = mapped_column(String(32), nullable=False)
    inputs: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    no_load_rate_per_kw: Mapped[float] = mapped_column(Float, nullable=False)
    load_rate_per_kw: Mapped[float] = mapped_column(Float, nullable=False)
    aux_rate_per_kw: Mapped[float] = mapped_column(Float, nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    created_by: Mapped[str | None] = mapped_column(String(64))
    # Why the planner made this revision (shown in the revision list and the audit trail).
    change_reason: Mapped[str | None] = mapped_column(Text)
    cost_basis: Mapped[CostBasis] = relationship(back_populates="revisions")


class LoadShape(Versioned, Base):
    """A year of hourly loading (built from daily curves or uploaded) and its figures."""

    __tablename__ = "load_shapes"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(120), nullable=False, unique=True)
    kind: Mapped[str] = mapped_column(String(16), nullable=False)  # "daily" or "hourly"
    unit: Mapped[str] = mapped_column(String(8), nullable=False)  # of the stored values: "pu" or "kva"
    year: Mapped[int] = mapped_column(Integer, nullable=False)
    seasons: Mapped[list[dict[str, Any]] | None] = mapped_column(JSON)
    values: Mapped[list[float]] = mapped_column(JSON, nullable=False)
    source: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    filled_hours: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    peak: Mapped[float] = mapped_column(Float, nullable=False)
    load_factor: Mapped[float] = mapped_column(Float, nullable=False)
    loss_factor: Mapped[float] = mapped_column(Float, nullable=False)
    rms_pu: Mapped[float] = mapped_column(Float, nullable=False)
    equivalent_hours: Mapped[float] = mapped_column(Float, nullable=False)


class Tender(Versioned, Base):
    __tablename__ = "tenders"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    reference: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    title: Mapped[str] = mapped_column(String(200), nullable=False)
    currency: Mapped[str] = mapped_column(String(3), nullable=False)
    status: Mapped[str] = mapped_column(String(16), nullable=False, default="draft")
    bid_opening_date: Mapped[date | None] = mapped_column(Date)
    # Tender currency per unit of each other currency, fixed at bid opening.
    exchange_rates: Mapped[dict[str, float]] = mapped_column(JSON, nullable=False, default=dict)
    # Contract terms for factory tests: which tolerances apply and how excess losses are charged.
    tolerance_standard: Mapped[str] = mapped_column(String(8), nullable=False, default="iec")
    penalty_multiplier: Mapped[float] = mapped_column(Float, nullable=False, default=1.0)
    penalty_credit_below: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    reject_beyond_tolerance: Mapped[bool] = mapped_column(Boolean, nullable=False, default=True)
    cost_basis_revision_id: Mapped[int] = mapped_column(
        ForeignKey("cost_basis_revisions.id", ondelete="RESTRICT"), nullable=False
    )
    cost_basis_revision: Mapped[CostBasisRevision] = relationship()
    lots: Mapped[list[Lot]] = relationship(
        back_populates="tender", order_by="Lot.id", cascade="all, delete-orphan"
    )


class Lot(Versioned, Base):
    __tablename__ = "lots"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    tender_id: Mapped[int] = mapped_column(ForeignKey("tenders.id", ondelete="CASCADE"), nullable=False, index=True)
    name: Mapped[str] = mapped_column(String(120), nullable=False)
    rating_kva: Mapped[float] = mapped_column(Float, nullable=False)
    phases: Mapped[int] = mapped_column(Integer, nullable=False)
    hv_kv: Mapped[float] = mapped_column(Float, nullable=False)
    lv_kv: Mapped[float] = mapped_column(Float, nullable=False)
    frequency_hz: Mapped[float] = mapped_column(Float, nullable=False)
    insulation: Mapped[str] = mapped_column(String(16), nullable=False)
    quantity: Mapped[int] = mapped_column(Integer, nullable=False)
    reference_temp_c: Mapped[float] = mapped_column(Float, nullable=False)
    # Winding conductor ("copper" or "aluminium"): its temperature constant refers load losses.
    conductor_material: Mapped[str] = mapped_column(String(16), nullable=False, default="copper",
                                                    server_default="copper")
    # Basic insulation level of the HV winding [kV]; picks the US medium-voltage dry-type column.
    bil_kv: Mapped[float | None] = mapped_column(Float)
    max_no_load_loss_w: Mapped[float | None] = mapped_column(Float)
    max_load_loss_w: Mapped[float | None] = mapped_column(Float)
    impedance_pct: Mapped[float | None] = mapped_column(Float)
    # The lot's own loading; where unset, the cost basis's loading applies.
    load_shape_id: Mapped[int | None] = mapped_column(ForeignKey("load_shapes.id", ondelete="RESTRICT"), index=True)
    peak_load_pu: Mapped[float | None] = mapped_column(Float)
    load_growth_pct: Mapped[float | None] = mapped_column(Float)
    # Keys of the limit tables (built-in or user-defined) the offers must meet.
    limit_tables: Mapped[list[str]] = mapped_column(JSON, nullable=False, default=list)
    # Set while an award stands: the revision that priced the award, kept when the tender moves on.
    cost_basis_revision_id: Mapped[int | None] = mapped_column(
        ForeignKey("cost_basis_revisions.id", ondelete="RESTRICT"), index=True
    )
    load_shape: Mapped[LoadShape | None] = relationship()
    cost_basis_revision: Mapped[CostBasisRevision | None] = relationship()
    tender: Mapped[Tender] = relationship(back_populates="lots")
    offers: Mapped[list[Offer]] = relationship(
        back_populates="lot", order_by="Offer.id", cascade="all, delete-orphan"
    )

    @property
    def pricing_revision(self) -> CostBasisRevision:
        """The cost basis revision that prices this lot: its own while an award pins one, else its tender's."""
        return self.cost_basis_revision or self.tender.cost_basis_revision


def bidder_key(bidder: str) -> str:
    """A bidder's name as offers are told apart: casefolded, each run of whitespace one space."""
    return " ".join(bidder.casefold().split())


class Offer(Versioned, Base):
    __tablename__ = "offers"
    __table_args__ = (UniqueConstraint("lot_id", "bidder_key"),)
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id", ondelete="CASCADE"), nullable=False, index=True)
    bidder: Mapped[str] = mapped_column(String(120), nullable=False)
    # ``bidder_key(bidder)``, set whenever the bidder is: one offer per bidder and lot, refused by
    # the database itself however the offers arrive at once. Casefolding can make a name up to
    # three times longer. None only on duplicates kept from before the rule (migration 0011).
    bidder_key: Mapped[str | None] = mapped_column(String(360))
    unit_price: Mapped[float] = mapped_column(Float, nullable=False)
    # The currency the price is stated in; None means the tender's currency.
    currency: Mapped[str | None] = mapped_column(String(3))
    no_load_loss_w: Mapped[float] = mapped_column(Float, nullable=False)
    load_loss_w: Mapped[float] = mapped_column(Float, nullable=False)
    aux_loss_w: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    impedance_pct: Mapped[float] = mapped_column(Float, nullable=False)
    no_load_current_pct: Mapped[float | None] = mapped_column(Float)
    # Share of the guaranteed load loss that is I2R (resistive) at the guarantee temperature [%];
    # None: the documented default applies when the loss is referred to another temperature.
    i2r_share_pct: Mapped[float | None] = mapped_column(Float)
    delivery_weeks: Mapped[int | None] = mapped_column(Integer)
    notes: Mapped[str | None] = mapped_column(Text)
    lot: Mapped[Lot] = relationship(back_populates="offers")

    @validates("bidder")
    def _set_bidder_key(self, _name: str, bidder: str | None) -> str | None:
        self.bidder_key = None if bidder is None else bidder_key(bidder)
        return bidder


# --- people, sessions, audit, awards ------------------------------------------------------------

ROLES = ("buyer", "planner", "approver", "viewer", "admin")


class User(Versioned, Base):
    __tablename__ = "users"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    username: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    password_hash: Mapped[str] = mapped_column(String(255), nullable=False)
    roles: Mapped[list[str]] = mapped_column(JSON, nullable=False, default=list)
    disabled: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)


class AuthSession(Base):
    """A browser session or an API token; only a hash of the secret is stored."""

    __tablename__ = "auth_sessions"

    id: Mapped[int] = mapped_column(primary_key=True)
    token_hash: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), nullable=False, index=True)
    kind: Mapped[str] = mapped_column(String(16), nullable=False)  # "browser" or "api"
    csrf_token: Mapped[str | None] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    last_seen_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    expires_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    revoked_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    user: Mapped[User] = relationship()


class LoginAttempt(Base):
    """One log-in attempt. The name is kept as typed only up to the longest user name, with a
    hash of all of it, so whatever is typed a row stays small."""

    __tablename__ = "login_attempts"
    __table_args__ = (
        Index("ix_login_attempts_username_at", "username", "at"),
        Index("ix_login_attempts_address_at", "address", "at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    username: Mapped[str] = mapped_column(String(64), nullable=False)
    # SHA-256 (hex) of the whole name as typed.
    username_hash: Mapped[str] = mapped_column(String(64), nullable=False)
    address: Mapped[str] = mapped_column(String(64), nullable=False)
    succeeded: Mapped[bool] = mapped_column(Boolean, nullable=False)


class LoginCounter(Base):
    """The log-ins of one account or one address counted against its limit in the current
    window: failures, and attempts whose password is being checked. One conditional UPDATE
    takes a place before the (slow) check, so guesses sent at once can never pass the limit."""

    __tablename__ = "login_counters"

    # "account:" and the SHA-256 of the name as typed, or "address:" and the client's address.
    key: Mapped[str] = mapped_column(String(80), primary_key=True)
    failures: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    window_started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)


class AuditEvent(Base):
    """One change or security event. Append-only: database triggers refuse UPDATE and DELETE."""

    __tablename__ = "audit_events"
    __table_args__ = (Index("ix_audit_events_object", "object_type", "object_id"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False, index=True)
    actor: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    action: Mapped[str] = mapped_column(String(32), nullable=False)
    object_type: Mapped[str] = mapped_column(String(32), nullable=False)
    object_id: Mapped[int | None] = mapped_column(Integer)
    summary: Mapped[str] = mapped_column(String(300), nullable=False, default="")
    before: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    after: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    address: Mapped[str | None] = mapped_column(String(64))


class EvaluationRecord(Base):
    """What was frozen when a lot was awarded: inputs, ranking, software version and hash."""

    __tablename__ = "evaluation_records"

    id: Mapped[int] = mapped_column(primary_key=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id", ondelete="RESTRICT"), nullable=False, index=True)
    awarded_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    awarded_by: Mapped[str] = mapped_column(String(64), nullable=False)
    awarded_offer_id: Mapped[int] = mapped_column(Integer, nullable=False)
    software_version: Mapped[str] = mapped_column(String(32), nullable=False)
    inputs: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    ranking: Mapped[list[dict[str, Any]]] = mapped_column(JSON, nullable=False)
    sha256: Mapped[str] = mapped_column(String(64), nullable=False)
    reopened_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    reopened_by: Mapped[str | None] = mapped_column(String(64))
    reopen_reason: Mapped[str | None] = mapped_column(Text)
    # Break-even sentences and a Monte Carlo at award time; outside the hashed inputs.
    robustness: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    # The award decision: chosen offer, margin, reason and acknowledged warnings (sealed with the inputs).
    decision: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    # HMAC-SHA256 of the sealed material with a server key (its id kept beside it), when one is set.
    seal_key_id: Mapped[str | None] = mapped_column(String(32))
    seal_hmac: Mapped[str | None] = mapped_column(String(64))
    lot: Mapped[Lot] = relationship()


class UserLimitTable(Versioned, Base):
    """A limit table a user defined (a utility's own specification), beside the built-in ones."""

    __tablename__ = "limit_tables"
    __mapper_args__ = {"version_id_col": Versioned.version}

    id: Mapped[int] = mapped_column(primary_key=True)
    key: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    name: Mapped[str] = mapped_column(String(200), nullable=False)
    source: Mapped[str] = mapped_column(String(300), nullable=False)
    status: Mapped[str] = mapped_column(String(16), nullable=False, default="user-defined")
    kind: Mapped[str] = mapped_column(String(16), nullable=False)  # max_losses, min_efficiency, min_pei
    phases: Mapped[int | None] = mapped_column(Integer)
    insulation: Mapped[str | None] = mapped_column(String(16))
    per_unit_load: Mapped[float] = mapped_column(Float, nullable=False, default=0.5)
    rows: Mapped[list[dict[str, float]]] = mapped_column(JSON, nullable=False)


class OfferImport(Base):
    """An uploaded offer file, checked and waiting to be committed all at once (or dropped)."""

    __tablename__ = "offer_imports"

    id: Mapped[int] = mapped_column(primary_key=True)
    tender_id: Mapped[int] = mapped_column(ForeignKey("tenders.id", ondelete="CASCADE"), nullable=False, index=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    created_by: Mapped[str] = mapped_column(String(64), nullable=False)
    filename: Mapped[str] = mapped_column(String(200), nullable=False)
    rows: Mapped[list[dict[str, Any]]] = mapped_column(JSON, nullable=False)
    committed_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))


class LimitTableReview(Base):
    """A planner's review of a built-in rule (a limit table or a tolerance rule): its status after
    checking it against ``document``. ``key`` is the rule's id."""

    __tablename__ = "limit_table_reviews"

    id: Mapped[int] = mapped_column(primary_key=True)
    key: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    status: Mapped[str] = mapped_column(String(16), nullable=False)
    note: Mapped[str] = mapped_column(Text, nullable=False, default="")
    # The document checked against: title, edition, clause, page.
    document: Mapped[str] = mapped_column(String(300), nullable=False, default="", server_default="")
    reviewed_by: Mapped[str] = mapped_column(String(64), nullable=False)
    reviewed_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)


class TestCertificate(Base):
    """A delivered unit's routine-test certificate: the readings, and the figures derived from them."""

    __test__ = False  # not a pytest test class
    __tablename__ = "test_certificates"
    __table_args__ = (UniqueConstraint("lot_id", "serial_number"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id", ondelete="RESTRICT"), nullable=False, index=True)
    offer_id: Mapped[int] = mapped_column(Integer, nullable=False)
    serial_number: Mapped[str] = mapped_column(String(64), nullable=False)
    test_date: Mapped[date] = mapped_column(Date, nullable=False)
    laboratory: Mapped[str] = mapped_column(String(200), nullable=False)
    entered_by: Mapped[str] = mapped_column(String(64), nullable=False)
    entered_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    readings: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    no_load_loss_w: Mapped[float] = mapped_column(Float, nullable=False)
    load_loss_at_reference_w: Mapped[float] = mapped_column(Float, nullable=False)
    impedance_pct: Mapped[float] = mapped_column(Float, nullable=False)
    no_load_current_pct: Mapped[float] = mapped_column(Float, nullable=False)
    within_tolerance: Mapped[bool] = mapped_column(Boolean, nullable=False)
    penalty: Mapped[float] = mapped_column(Float, nullable=False)
    rejected: Mapped[bool] = mapped_column(Boolean, nullable=False)


class FleetUnit(Base):
    """One installed transformer. Losses marked estimated came from the typical-loss table."""

    __tablename__ = "fleet_units"

    id: Mapped[int] = mapped_column(primary_key=True)
    asset_id: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    site: Mapped[str] = mapped_column(String(120), nullable=False, default="")
    region: Mapped[str] = mapped_column(String(120), nullable=False, default="")
    rating_kva: Mapped[float] = mapped_column(Float, nullable=False)
    phases: Mapped[int] = mapped_column(Integer, nullable=False, default=3)
    insulation: Mapped[str] = mapped_column(String(16), nullable=False, default="liquid")
    year_installed: Mapped[int] = mapped_column(Integer, nullable=False)
    no_load_loss_w: Mapped[float] = mapped_column(Float, nullable=False)
    load_loss_w: Mapped[float] = mapped_column(Float, nullable=False)
    no_load_loss_estimated: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    load_loss_estimated: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    peak_load_pu: Mapped[float] = mapped_column(Float, nullable=False)
    loss_factor: Mapped[float] = mapped_column(Float, nullable=False)
    load_shape_id: Mapped[int | None] = mapped_column(ForeignKey("load_shapes.id", ondelete="SET NULL"))
    version: Mapped[int] = mapped_column(Integer, nullable=False, default=1)
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)


class FleetImport(Base):
    """An uploaded inventory file, checked and waiting to be committed (or dropped)."""

    __tablename__ = "fleet_imports"

    id: Mapped[int] = mapped_column(primary_key=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    created_by: Mapped[str] = mapped_column(String(64), nullable=False)
    filename: Mapped[str] = mapped_column(String(200), nullable=False)
    content: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    summary: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    committed_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))


class AppDocument(Base):
    """A small editable document the application keeps (e.g. the typical-loss table)."""

    __tablename__ = "app_documents"

    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    value: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    version: Mapped[int] = mapped_column(Integer, nullable=False, default=1)
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    updated_by: Mapped[str] = mapped_column(String(64), nullable=False, default="system")


class Job(Base):
    """A piece of long work on the job queue (``server.jobs``): what to do, for whom, and how far
    it has got. The same rows on either engine; on PostgreSQL the queue library only carries
    their ids to a worker, so what a person sees never depends on the library's tables."""

    __tablename__ = "jobs"

    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String(32), nullable=False)
    owner: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    payload: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    # queued, running, done, failed or cancelled (server.jobs.STATUSES).
    status: Mapped[str] = mapped_column(String(16), nullable=False, default="queued", index=True)
    progress: Mapped[float] = mapped_column(Float, nullable=False, default=0.0)
    cancel_requested: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    message: Mapped[str] = mapped_column(Text, nullable=False, default="")
    # The worker that holds the job while it runs (JobWorker.id; no foreign key, so that a
    # worker's row can go while the job keeps the name of who dropped it).
    worker_id: Mapped[str | None] = mapped_column(String(64))
    # The queue library's own id of the job (PostgreSQL only).
    queue_job_id: Mapped[int | None] = mapped_column(BigInteger)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    started_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))


class JobWorker(Base):
    """A process that runs jobs, while it lives: the host and process it runs as and when it last
    said it was alive. A job held by a worker that is gone is failed (``server.jobs``)."""

    __tablename__ = "job_workers"

    id: Mapped[str] = mapped_column(String(64), primary_key=True)
    host: Mapped[str] = mapped_column(String(255), nullable=False)
    pid: Mapped[int] = mapped_column(Integer, nullable=False)
    started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    heartbeat_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)


class MonteCarloRun(Base):
    """A Monte Carlo run of a lot's ranking: what was asked and, once done, the result. Its state
    (queued, running, done, failed, cancelled), progress and cancel request are its job's, so any
    worker can report them and a cancel request reaches the run."""

    __tablename__ = "monte_carlo_runs"

    id: Mapped[int] = mapped_column(primary_key=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id", ondelete="CASCADE"), nullable=False, index=True)
    job_id: Mapped[int] = mapped_column(ForeignKey("jobs.id"), nullable=False, unique=True)
    created_by: Mapped[str] = mapped_column(String(64), nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow, nullable=False)
    request: Mapped[dict[str, Any]] = mapped_column(JSON, nullable=False)
    result: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    job: Mapped[Job] = relationship(lazy="joined")


class DataVersion(Base):
    """The version of the evaluated data: one row, moved inside every transaction that changes
    anything a ranking or page shows (``server.storage.generation.bump``), never by a log-in."""

    __tablename__ = "data_version"
    __table_args__ = (CheckConstraint("id = 1", name="single_row"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    value: Mapped[int] = mapped_column(BigInteger, nullable=False)
    # Drawn at random whenever the row is made, so a database emptied and refilled never
    # repeats a version an earlier filling had (caches key on both).
    epoch: Mapped[int] = mapped_column(BigInteger, nullable=False)
    changed_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
