"""Use cases for people: accounts, roles, log-in with throttling, sessions and tokens."""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlalchemy import DateTime, bindparam, case, or_, select, text, update
from sqlalchemy.orm import Session

from server.errors import InvalidField, NotFound, ServiceError
from server.security import hash_password, new_token, token_hash, verify_password
from server.services.common import check_version, commit, get_or_404
from server.settings import Settings
from server.storage import audit, generation
from server.storage.models import ROLES, AuthSession, LoginAttempt, LoginCounter, User, utcnow

MIN_PASSWORD_LENGTH = 10
# How often a session's last-seen time is written: not on every request.
_TOUCH_EVERY = timedelta(seconds=60)


class LoginRefused(ServiceError):
    """Wrong name or password, a disabled account, or a lock-out; the message never says which."""

    status_code = 401


@dataclass(frozen=True)
class Principal:
    """The user behind a request and the session or token that authenticated it."""

    user_id: int
    username: str
    roles: frozenset[str]
    session_id: int
    kind: str
    csrf_token: str | None

    def has_any(self, roles) -> bool:
        return bool(self.roles & set(roles))


def _check_roles(roles: list[str]) -> list[str]:
    unknown = sorted(set(roles) - set(ROLES))
    if unknown:
        raise InvalidField("roles", f"unknown role {', '.join(unknown)}; choose from {', '.join(ROLES)}.")
    return sorted(set(roles))


def _check_password(password: str) -> None:
    if len(password) < MIN_PASSWORD_LENGTH:
        raise InvalidField("password", f"must have at least {MIN_PASSWORD_LENGTH} characters.")


def get_user_by_name(session: Session, username: str) -> User:
    user = session.scalar(select(User).where(User.username == username))
    if user is None:
        raise NotFound(f"No user called '{username}'.")
    return user


def list_users(session: Session) -> list[User]:
    return list(session.scalars(select(User).order_by(User.username)))


def create_user(session: Session, username: str, password: str, roles: list[str]) -> User:
    username = username.strip()
    if not username or len(username) > 64:
        raise InvalidField("username", "must have 1 to 64 characters.")
    if session.scalar(select(User.id).where(User.username == username)) is not None:
        raise InvalidField("username", f"a user called '{username}' already exists.")
    _check_password(password)
    user = User(username=username, password_hash=hash_password(password), roles=_check_roles(roles))
    session.add(user)
    commit(session, "user", unique_field="username")
    return user


def set_password(session: Session, username: str, password: str) -> User:
    _check_password(password)
    user = get_user_by_name(session, username)
    user.password_hash = hash_password(password)
    _revoke_all(session, user.id)
    commit(session, "user")
    return user


def disable_user(session: Session, username: str) -> User:
    user = get_user_by_name(session, username)
    user.disabled = True
    _revoke_all(session, user.id)
    commit(session, "user")
    return user


def _revoke_all(session: Session, user_id: int) -> None:
    session.execute(
        update(AuthSession)
        .where(AuthSession.user_id == user_id, AuthSession.revoked_at.is_(None))
        .values(revoked_at=utcnow())
    )


# What is kept of a name typed at log-in (the longest user name) and of the client's address:
# a row stays small whatever is typed, and PostgreSQL never refuses one as too long.
MAX_NAME_CHARS = 64
MAX_ADDRESS_CHARS = 64

_COUNTERS = LoginCounter.__table__
# Made on first use; concurrent first attempts for one key make one row between them.
_NEW_COUNTER = text(
    'INSERT INTO login_counters ("key", failures, window_started_at) VALUES (:key, 0, :now) '
    'ON CONFLICT ("key") DO NOTHING'
).bindparams(bindparam("now", type_=DateTime(timezone=True)))


def name_hash(typed: str) -> str:
    """SHA-256 (hex) of a name as typed, however long: what per-account counting keys on."""
    return hashlib.sha256(typed.encode("utf-8", "surrogatepass")).hexdigest()


@dataclass(frozen=True)
class _Place:
    """A place an attempt holds on one counter: the counter, the window it counts in, and the
    count with this attempt in it."""

    key: str
    window_started_at: datetime
    failures: int


def _take_places(session: Session, limits: list[tuple[str, int]], now: datetime, since: datetime) -> list[_Place] | None:
    """One place on each counter, or none at all when any is full (a lock-out).

    Each place is one conditional UPDATE (a window older than ``since`` starts again), and the
    places are committed at once, before the password is checked: attempts sent together wait
    for one another only this long, and whatever their number at most ``limit`` of them are
    ever checked within one window."""
    places = []
    for key, limit in limits:
        session.execute(_NEW_COUNTER, {"key": key, "now": now})
        expired = _COUNTERS.c.window_started_at < since
        row = session.execute(
            update(_COUNTERS)
            .where(_COUNTERS.c.key == key, or_(expired, _COUNTERS.c.failures < limit))
            .values(failures=case((expired, 1), else_=_COUNTERS.c.failures + 1),
                    window_started_at=case((expired, now), else_=_COUNTERS.c.window_started_at))
            .returning(_COUNTERS.c.window_started_at, _COUNTERS.c.failures)
        ).first()
        if row is None:
            session.rollback()  # the places taken on the other counters go back with it
            return None
        places.append(_Place(key, row.window_started_at, row.failures))
    session.commit()
    return places


def _give_back(session: Session, places: list[_Place]) -> None:
    """A log-in that succeeded frees its places (in the window it took them in)."""
    for place in places:
        session.execute(
            update(_COUNTERS)
            .where(_COUNTERS.c.key == place.key, _COUNTERS.c.window_started_at == place.window_started_at,
                   _COUNTERS.c.failures > 0)
            .values(failures=_COUNTERS.c.failures - 1)
        )


def log_in(session: Session, settings: Settings, username: str, password: str, address: str, kind: str) -> tuple[str, AuthSession]:
    """Check the password under throttling; on success open a new session (never reuse one).

    An attempt first takes a place on its account's counter (the name as typed) and its
    address's, then checks the password: a full counter refuses it unchecked. Only the first
    ``MAX_NAME_CHARS`` characters of the name are stored, with its hash.

    Returns the raw token (for the cookie or the bearer header) and the stored session.
    """
    now = utcnow()
    since = now - timedelta(minutes=settings.lockout_minutes)
    name, typed_hash, address = username[:MAX_NAME_CHARS], name_hash(username), address[:MAX_ADDRESS_CHARS]
    actor = audit.Actor(name or "(blank)", address)
    # A name longer than any user's is nobody's; it is not sent to the database to find out.
    user = session.scalar(select(User).where(User.username == username)) if username == name else None
    places = _take_places(session, [(f"account:{typed_hash}", settings.lockout_failures),
                                    (f"address:{address}", settings.address_lockout_failures)], now, since)
    if places is None:
        session.add(LoginAttempt(username=name, username_hash=typed_hash, address=address, succeeded=False, at=now))
        audit.record(session, "login_locked", "user", user.id if user else None,
                     f"log-in refused while '{name}' or {address} is locked out", actor=actor)
        session.commit()
        raise LoginRefused(
            f"Too many failed log-ins: try again in {settings.lockout_minutes} minutes, or ask an administrator."
        )
    ok = verify_password(password, user.password_hash if user else None) and user is not None and not user.disabled
    session.add(LoginAttempt(username=name, username_hash=typed_hash, address=address, succeeded=ok, at=now))
    if not ok:
        audit.record(session, "login_failed", "user", user.id if user else None,
                     f"failed log-in as '{name}'", actor=actor)
        account, at_address = places
        if account.failures == settings.lockout_failures:
            audit.record(session, "lockout", "user", user.id if user else None,
                         f"'{name}' locked out for {settings.lockout_minutes} minutes", actor=actor)
        if at_address.failures == settings.address_lockout_failures:
            audit.record(session, "lockout", "user", None,
                         f"{address} locked out for {settings.lockout_minutes} minutes", actor=actor)
        session.commit()
        raise LoginRefused("Wrong user name or password.")
    _give_back(session, places)
    token = new_token()
    lifetime = (
        timedelta(hours=settings.session_max_hours) if kind == "browser" else timedelta(minutes=settings.token_minutes)
    )
    stored = AuthSession(
        token_hash=token_hash(token),
        user_id=user.id,
        kind=kind,
        csrf_token=new_token() if kind == "browser" else None,
        created_at=now,
        last_seen_at=now,
        expires_at=now + lifetime,
    )
    session.add(stored)
    audit.record(session, "login", "user", user.id, f"'{username}' logged in ({kind})",
                 actor=audit.Actor(username, address, user.id))
    session.commit()
    return token, stored


# Who holds a token, and the data version, in one statement built once (composing it cost
# more than running it). Every column is named: ``principal_from_row`` and
# ``generation.version_of`` read the row by name.
RESOLVE = generation.with_data_version(
    select(AuthSession.id.label("session_id"), AuthSession.kind, AuthSession.csrf_token, AuthSession.revoked_at,
           AuthSession.expires_at, AuthSession.last_seen_at, User.id.label("user_id"), User.username, User.roles,
           User.disabled)
    .join(User, User.id == AuthSession.user_id)
    .where(AuthSession.token_hash == bindparam("token_hash"))
)


def resolve(session: Session, settings: Settings, token: str | None, kinds: tuple[str, ...]) -> Principal | None:
    """The principal behind a raw token, or None when it is unknown, expired, idle or revoked."""
    if not token:
        return None
    row = session.execute(RESOLVE, {"token_hash": token_hash(token)}).first()
    if row is None:
        return None
    generation.remember(session, generation.version_of(row))
    principal, stale = principal_from_row(row, settings, kinds)
    if stale:
        touch(session, principal.session_id)
    return principal


def principal_from_row(row, settings: Settings, kinds: tuple[str, ...]) -> tuple[Principal | None, bool]:
    """The principal of a ``RESOLVE`` row (a SQLAlchemy row, or ``Database.read_row``'s named
    tuple of the driver's values), or None when the session is of another kind, revoked,
    expired or idle, or the user disabled; and whether its last-seen time is old enough to be
    written again (``touch``)."""
    kind = row.kind
    if kind not in kinds or row.revoked_at is not None or row.disabled:
        return None, False
    now = utcnow()
    last_seen = _aware(row.last_seen_at)
    if now >= _aware(row.expires_at):
        return None, False
    if kind == "browser" and now - last_seen > timedelta(minutes=settings.session_idle_minutes):
        return None, False
    roles = json.loads(row.roles) if isinstance(row.roles, str) else row.roles
    principal = Principal(row.user_id, row.username, frozenset(roles), row.session_id, kind, row.csrf_token)
    return principal, now - last_seen > _TOUCH_EVERY


def touch(session: Session, session_id: int) -> None:
    """Write a session's last-seen time (its idle clock restarts)."""
    session.execute(update(AuthSession).where(AuthSession.id == session_id).values(last_seen_at=utcnow()))
    session.commit()


def _aware(moment: datetime | str) -> datetime:
    # SQLite keeps times as naive text; every stored time is UTC.
    if isinstance(moment, str):
        moment = datetime.fromisoformat(moment)
    return moment if moment.tzinfo else moment.replace(tzinfo=UTC)


def revoke(session: Session, session_id: int, actor: audit.Actor) -> None:
    stored = session.get(AuthSession, session_id)
    if stored is not None and stored.revoked_at is None:
        stored.revoked_at = utcnow()
        audit.record(session, "logout" if stored.kind == "browser" else "token_revoked", "user", stored.user_id,
                     f"'{actor.username}' ended a {stored.kind} session", actor=actor)
        session.commit()


def patch_user(session: Session, user_id: int, patch) -> User:
    """Change a user's roles, disable or enable it, or set a new password (sessions end)."""
    user = get_or_404(session, User, user_id, "User")
    check_version(user, patch.version, "user")
    if patch.roles is not None:
        user.roles = _check_roles(list(patch.roles))
    if patch.password is not None:
        _check_password(patch.password)
        user.password_hash = hash_password(patch.password)
        _revoke_all(session, user.id)
    if patch.disabled is not None:
        user.disabled = patch.disabled
        if patch.disabled:
            _revoke_all(session, user.id)
    commit(session, "user")
    return user
