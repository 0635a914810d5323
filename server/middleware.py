"""ASGI middleware: request logs, security and cache headers, control-character refusal,
unhandled errors answered inside the stack, and a request body size limit."""

from __future__ import annotations

import json
import logging
import re
import time
import uuid
from collections.abc import Awaitable, Callable
from urllib.parse import parse_qsl

from starlette.datastructures import MutableHeaders
from starlette.requests import Request
from starlette.responses import JSONResponse, PlainTextResponse, Response
from starlette.types import ASGIApp, Message, Receive, Scope, Send

# No inline script anywhere; the API docs page alone needs inline styles (Swagger UI).
CSP = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "font-src 'self'; connect-src 'self'; object-src 'none'; base-uri 'self'; "
    "form-action 'self'; frame-ancestors 'none'"
)
CSP_DOCS = CSP.replace("style-src 'self'", "style-src 'self' 'unsafe-inline'")

# Vendored files carry their version in the name (static/vendor/htmx-2.0.11.min.js): a new
# version is a new address, so a browser may keep one for a year without asking again. The
# application's own css and js keep their names across releases: a browser asks again soon.
VERSIONED_STATIC = re.compile(r"^/static/vendor/[^/]+-\d+(?:\.\d+)+[^/]*$")
STATIC_LONG = "public, max-age=31536000, immutable"
STATIC_SHORT = "public, max-age=300"


class SecurityHeaders:
    """Security headers on every response; cache headers by kind (static files or not)."""

    def __init__(self, app: ASGIApp, https_only: bool = False) -> None:
        self.app = app
        self.https_only = https_only

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = scope.get("path", "")

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                headers.setdefault("Content-Security-Policy", CSP_DOCS if path == "/docs" else CSP)
                headers.setdefault("X-Content-Type-Options", "nosniff")
                headers.setdefault("X-Frame-Options", "DENY")
                headers.setdefault("Referrer-Policy", "same-origin")
                headers.setdefault("Cross-Origin-Opener-Policy", "same-origin")
                if scope.get("scheme") == "https":
                    headers.setdefault("Strict-Transport-Security", "max-age=31536000")
                if not path.startswith("/static/") or message["status"] >= 400:
                    headers.setdefault("Cache-Control", "no-store")
                else:
                    headers.setdefault("Cache-Control", STATIC_LONG if VERSIONED_STATIC.match(path) else STATIC_SHORT)
            await send(message)

        await self.app(scope, receive, send_with_headers)


class UnhandledErrors:
    """Answer an exception no handler took with ``render``'s response, inside the middleware
    stack: the 500 then carries the security headers, is logged like any request, and the
    connection stays open (an exception raised out of the application makes the server drop
    it). An error after the response has started can only end it, so it is raised on."""

    def __init__(self, app: ASGIApp, render: Callable[[Request, Exception], Awaitable[Response]]) -> None:
        self.app = app
        self.render = render

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = False

        async def send_and_note(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, receive, send_and_note)
        except Exception as exc:
            if started:
                raise
            response = await self.render(Request(scope, receive), exc)
            await response(scope, receive, send)


# No address or filter ever holds a control character, not even a tab or a line break.
_ADDRESS_CONTROLS = re.compile("[\x00-\x1f\x7f]")


def _refusal(place: str, name: str | None, text: str) -> JSONResponse | None:
    found = _ADDRESS_CONTROLS.search(text)
    if found is None:
        return None
    loc = [place] if name is None else [place, name]
    message = f"may not contain control characters (found U+{ord(found.group()):04X})"
    return JSONResponse({"detail": [{"loc": loc, "msg": message, "type": "value_error"}]}, status_code=422)


_FORM = "application/x-www-form-urlencoded"


class ControlCharacters:
    """Refuse (422, naming the parameter) control characters in the path and the query string,
    and NUL in a form post, before any route reads them.

    JSON bodies and the form fields that reach a schema are checked by the schemas
    (``server.schemas.Strict``) with their own field names; this covers the text that reaches
    the database without one (query filters, path keys, log-in names). PostgreSQL cannot
    store or even compare a NUL, and no address or filter ever holds a tab or a line break.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        refusal = self._in_address(scope)
        content_type = dict(scope.get("headers", [])).get(b"content-type", b"").decode("latin-1").lower()
        if refusal is None and content_type.startswith(_FORM):
            body, receive = await _read_body(receive)
            refusal = self._in_form(body)
        if refusal is not None:
            await refusal(scope, receive, send)
            return
        await self.app(scope, receive, send)

    @staticmethod
    def _in_address(scope: Scope) -> JSONResponse | None:
        refusal = _refusal("path", None, scope.get("path", ""))
        if refusal is not None:
            return refusal
        query = scope.get("query_string", b"").decode("utf-8", "replace")
        for name, value in parse_qsl(query, keep_blank_values=True):
            refusal = _refusal("query", name, name + value)
            if refusal is not None:
                return refusal
        return None

    @staticmethod
    def _in_form(body: bytes) -> JSONResponse | None:
        if b"\x00" not in body and b"%00" not in body:
            return None
        for name, value in parse_qsl(body.decode("utf-8", "replace"), keep_blank_values=True):
            if "\x00" in name or "\x00" in value:
                return _refusal("body", name.replace("\x00", ""), "\x00")
        return None


async def _read_body(receive: Receive) -> tuple[bytes, Receive]:
    """The whole request body, and a ``receive`` that hands it to the application again."""
    chunks: list[bytes] = []
    while True:
        message = await receive()
        if message["type"] != "http.request":
            break
        chunks.append(message.get("body", b""))
        if not message.get("more_body", False):
            break
    body = b"".join(chunks)
    replayed = False

    async def replay() -> Message:
        nonlocal replayed
        if not replayed:
            replayed = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await receive()

    return body, replay


class BodySizeLimit:
    """Refuse a request body larger than ``max_bytes`` with 413, declared or streamed."""

    def __init__(self, app: ASGIApp, max_bytes: int) -> None:
        self.app = app
        self.max_bytes = max_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        too_big = PlainTextResponse(
            f"The request body is larger than the {self.max_bytes:,} bytes this server accepts.", status_code=413
        )
        declared = dict(scope.get("headers", [])).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.max_bytes:
            await too_big(scope, receive, send)
            return
        seen = 0

        async def counting_receive() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.max_bytes:
                    raise _BodyTooLarge
            return message

        try:
            await self.app(scope, counting_receive, send)
        except _BodyTooLarge:
            await too_big(scope, receive, send)


class _BodyTooLarge(Exception):
    pass


# An incoming request id is kept when it is short and plain (a proxy's or a client's own);
# anything else is replaced, so that a log line never carries what a stranger chose to write.
_REQUEST_ID = re.compile(r"^[A-Za-z0-9._:@/+=-]{1,128}$")
REQUEST_ID_HEADER = "X-Request-ID"


class RequestLog:
    """One JSON line per request on the ``lossledger.request`` logger: request id, user,
    method, path, status, duration and client address. The request id (the client's
    ``X-Request-ID`` when it sends a plain one, else a new one) is echoed in the response."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app
        self.log = logging.getLogger("lossledger.request")

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = 500
        sent = dict(scope.get("headers", [])).get(b"x-request-id", b"").decode("latin-1")
        request_id = sent if _REQUEST_ID.match(sent) else uuid.uuid4().hex
        state = scope.setdefault("state", {})
        state["request_id"] = request_id

        async def send_and_note(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
                MutableHeaders(scope=message)[REQUEST_ID_HEADER] = request_id
            await send(message)

        try:
            await self.app(scope, receive, send_and_note)
        finally:
            if self.log.isEnabledFor(logging.INFO):
                client = scope.get("client")
                principal = state.get("principal")  # set by server.auth.Requires once it knows
                self.log.info(json.dumps({
                    "request_id": request_id, "user": getattr(principal, "username", None),
                    "method": scope.get("method"), "path": scope.get("path"), "status": status,
                    "ms": round((time.perf_counter() - started) * 1000, 2),
                    "client": client[0] if client else None,
                }))


def log_config(level: str = "INFO") -> dict:
    """The logging set-up for ``uvicorn.run(log_config=...)``, which every worker process
    applies when it starts: request logs as bare JSON lines on standard output, everything else
    (start-up, errors with their tracebacks) as text on standard error. Uvicorn's own access
    log is off; ``RequestLog`` says more."""
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {
            "json_line": {"format": "%(message)s"},
            "text": {"format": "%(asctime)s %(levelname)s %(name)s: %(message)s"},
        },
        "handlers": {
            "requests": {"class": "logging.StreamHandler", "formatter": "json_line", "stream": "ext://sys.stdout"},
            "text": {"class": "logging.StreamHandler", "formatter": "text", "stream": "ext://sys.stderr"},
        },
        "loggers": {
            "lossledger.request": {"handlers": ["requests"], "level": level, "propagate": False},
            "lossledger": {"handlers": ["text"], "level": level, "propagate": False},
            "uvicorn": {"handlers": ["text"], "level": level, "propagate": False},
            "uvicorn.access": {"handlers": [], "level": "WARNING", "propagate": False},
        },
        "root": {"handlers": ["text"], "level": "WARNING"},
    }
