"""Who may call what: authentication, roles and CSRF checks as one FastAPI dependency.

Every route except the public ones (log-in, token, health, static files) declares
``dependencies=[Depends(Requires(...))]``; a test walks the route table to make sure.
"""

from __future__ import annotations

from urllib.parse import urlsplit

from fastapi import Depends, Request
from starlette.concurrency import run_in_threadpool

from server.errors import ServiceError
from server.security import CSRF_FIELD, CSRF_HEADER, SESSION_COOKIE, same_secret, token_hash, unsign_cookie
from server.services import users
from server.storage import generation
from server.storage.audit import Actor
from server.storage.database import Database
from server.storage.models import ROLES

SAFE_METHODS = {"GET", "HEAD", "OPTIONS"}


class NotAuthenticated(ServiceError):
    status_code = 401


class Forbidden(ServiceError):
    status_code = 403


def client_address(request: Request) -> str:
    return request.client.host if request.client else "unknown"


def _bearer(request: Request) -> str | None:
    header = request.headers.get("authorization", "")
    scheme, _, value = header.partition(" ")
    return value.strip() if scheme.lower() == "bearer" and value.strip() else None


_DEFAULT_PORTS = {"http": 80, "https": 443}


def _origin(url: str) -> tuple[str, str, int | None] | None:
    """Scheme, host and port of ``url`` (the port left out when it is the scheme's own)."""
    try:
        parts = urlsplit(url.strip())
        port = parts.port
    except ValueError:
        return None
    scheme = parts.scheme.lower()
    return scheme, (parts.hostname or "").lower(), None if port == _DEFAULT_PORTS.get(scheme) else port


def same_origin(request: Request) -> bool:
    """An Origin (or, failing that, Referer) header must name this very site when present:
    the configured public origin (``LOSSLEDGER_PUBLIC_ORIGIN``, needed behind a proxy that
    rewrites the Host header), else the host the request was sent to."""
    source = request.headers.get("origin") or request.headers.get("referer")
    if not source:
        return True
    public = request.app.state.settings.public_origin
    if public:
        return _origin(source) == _origin(public)
    parts = urlsplit(source)
    return parts.netloc == request.headers.get("host", request.url.netloc)


async def _check_csrf(request: Request, principal: users.Principal) -> None:
    if not same_origin(request):
        raise Forbidden("This request came from another site and was refused.")
    sent = request.headers.get(CSRF_HEADER)
    if sent is None and request.headers.get("content-type", "").startswith(
        ("application/x-www-form-urlencoded", "multipart/form-data")
    ):
        sent = (await request.form()).get(CSRF_FIELD)
    if not same_secret(sent if isinstance(sent, str) else None, principal.csrf_token):
        raise Forbidden("The form's security token is missing or out of date; reload the page and try again.")


async def _resolve(db: Database, settings, token: str | None, kinds: tuple[str, ...]):
    """The principal and the data version, read in one round trip (``Database.read_row_async``);
    a session's last-seen time is written at most once a minute."""
    if not token:
        return None, None
    row = await db.read_row_async(users.RESOLVE, {"token_hash": token_hash(token)})
    if row is None:
        return None, None
    principal, stale = users.principal_from_row(row, settings, kinds)
    if stale:
        await run_in_threadpool(_touch, db, principal.session_id)
    return principal, generation.version_of(row)


def _touch(db: Database, session_id: int) -> None:
    with db.session() as session:
        users.touch(session, session_id)


class Requires:
    """A logged-in user who holds one of ``roles`` (any role at all when none are named)."""

    def __init__(self, *roles: str) -> None:
        unknown = set(roles) - set(ROLES)
        if unknown:
            raise ValueError(f"unknown roles {unknown}")
        self.roles = frozenset(roles)

    def __repr__(self) -> str:
        return f"Requires({', '.join(sorted(self.roles)) or 'any role'})"

    async def __call__(self, request: Request) -> users.Principal:
        settings = request.app.state.settings
        token = _bearer(request)
        cookie = None if token else unsign_cookie(settings.secret_key, request.cookies.get(SESSION_COOKIE))
        principal, generation = await _resolve(
            request.app.state.db, settings, token or cookie, ("api",) if token else ("browser",))
        if principal is None:
            raise NotAuthenticated("Log in first." if not token else "The token is missing, expired or revoked.")
        if principal.kind == "browser" and request.method not in SAFE_METHODS:
            await _check_csrf(request, principal)
        if not principal.has_any(self.roles or ROLES):
            needed = " or ".join(sorted(self.roles)) if self.roles else "any role"
            raise Forbidden(f"This needs the {needed} role; {principal.username} does not hold it.")
        request.state.principal = principal
        request.state.actor = Actor(principal.username, client_address(request), principal.user_id)
        request.state.generation = generation
        return principal


# The dependencies routes declare, by who may call them.
ANY_ROLE = Depends(Requires())
BUYER = Depends(Requires("buyer"))
PLANNER = Depends(Requires("planner"))
APPROVER = Depends(Requires("approver"))
ADMIN = Depends(Requires("admin"))
