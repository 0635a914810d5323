"""Use cases for people: accounts, roles, log-in with throttling, sessions and tokens."""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlalchemy import bindparam, func, select, update
from sqlalchemy.orm import Session

from server.errors import InvalidField, NotFound, ServiceError
from server.security import hash_password, new_token, token_hash, verify_password
from server.services.common import check_version, commit, get_or_404
from server.settings import Settings
from server.storage import audit, generation
from server.storage.models import ROLES, AuthSession, LoginAttempt, User, utcnow

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


def set_roles(session: Session, username: str, roles: list[str]) -> User:
    user = get_user_by_name(session, username)
    user.roles = _check_roles(roles)
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


def _failures_since(session: Session, column, value: str, since: datetime) -> int:
    return session.scalar(
        select(func.count()).select_from(LoginAttempt).where(
            column == value, LoginAttempt.succeeded.is_(False), LoginAttempt.at >= since
        )
    )


def log_in(session: Session, settings: Settings, username: str, password: str, address: str, kind: str) -> tuple[str, AuthSession]:
    """Check the password under throttling; on success open a new session (never reuse one).

    Returns the raw token (for the cookie or the bearer header) and the stored session.
    """
    now = utcnow()
    since = now - timedelta(minutes=settings.lockout_minutes)
    actor = audit.Actor(username or "(blank)", address)
    locked = (
        _failures_since(session, LoginAttempt.username, username, since) >= settings.lockout_failures
        or _failures_since(session, LoginAttempt.address, address, since) >= settings.address_lockout_failures
    )
    user = session.scalar(select(User).where(User.username == username))
    if locked:
        session.add(LoginAttempt(username=username, address=address, succeeded=False, at=now))
        audit.record(session, "login_locked", "user", user.id if user else None,
                     f"log-in refused while '{username}' or {address} is locked out", actor=actor)
        session.commit()
        raise LoginRefused(
            f"Too many failed log-ins: try again in {settings.lockout_minutes} minutes, or ask an administrator."
        )
    ok = verify_password(password, user.password_hash if user else None) and user is not None and not user.disabled
    session.add(LoginAttempt(username=username, address=address, succeeded=ok, at=now))
    if not ok:
        audit.record(session, "login_failed", "user", user.id if user else None,
                     f"failed log-in as '{username}'", actor=actor)
        if _failures_since(session, LoginAttempt.username, username, since) + 1 == settings.lockout_failures:
            audit.record(session, "lockout", "user", user.id if user else None,
                         f"'{username}' locked out for {settings.lockout_minutes} minutes", actor=actor)
        session.commit()
        raise LoginRefused("Wrong user name or password.")
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


# Who holds a token, and the data generation, in one statement built once (composing it cost
# more than running it). Columns as ``principal_from_row`` takes them.
RESOLVE = (
    select(AuthSession.id, AuthSession.kind, AuthSession.csrf_token, AuthSession.revoked_at, AuthSession.expires_at,
           AuthSession.last_seen_at, User.id, User.username, User.roles, User.disabled,
           *generation.generation_columns())
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
    generation.remember(session, generation.generation_value(row[-2], row[-1]))
    principal, stale = principal_from_row(tuple(row), settings, kinds)
    if stale:
        touch(session, principal.session_id)
    return principal


def principal_from_row(row: tuple, settings: Settings, kinds: tuple[str, ...]) -> tuple[Principal | None, bool]:
    """The principal of a ``RESOLVE`` row (values as SQLAlchemy or the driver gives them), or
    None when the session is of another kind, revoked, expired or idle, or the user disabled;
    and whether its last-seen time is old enough to be written again (``touch``)."""
    (session_id, kind, csrf_token, revoked_at, expires_at, last_seen_at, user_id, username, roles, disabled,
     *_generation) = row
    if kind not in kinds or revoked_at is not None or disabled:
        return None, False
    now = utcnow()
    last_seen = _aware(last_seen_at)
    if now >= _aware(expires_at):
        return None, False
    if kind == "browser" and now - last_seen > timedelta(minutes=settings.session_idle_minutes):
        return None, False
    roles = json.loads(roles) if isinstance(roles, str) else roles
    return Principal(user_id, username, frozenset(roles), session_id, kind, csrf_token), now - last_seen > _TOUCH_EVERY


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
