"""Application factory: wires settings, database, security, routes and error handling."""

from __future__ import annotations

import asyncio
import logging
from contextlib import asynccontextmanager
from functools import lru_cache
from pathlib import Path
from urllib.parse import quote

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import HTMLResponse, JSONResponse, RedirectResponse, Response
from fastapi.staticfiles import StaticFiles
from pydantic import ValidationError
from starlette.middleware.gzip import DEFAULT_EXCLUDED_CONTENT_TYPES, GZipMiddleware

from server import api, pages
from server.auth import ANY_ROLE, NotAuthenticated
from server.errors import Conflict, ImportRefused, InvalidField, ServiceError
from server.middleware import BodySizeLimit, ControlCharacters, RequestLog, SecurityHeaders, UnhandledErrors
from server.settings import Settings, get_settings
from server.storage.database import Database
from server.storage.migrate import alembic_config
from server.version import VERSION

STATIC_DIR = Path(__file__).resolve().parents[1] / "static"
log = logging.getLogger("lossledger")

# Not compressed: HTML pages carry the session's form token beside text the request chose
# (filters, form values), and compressing both together lets an observer of the sizes guess
# the token (BREACH); workbooks and images are compressed already.
NOT_COMPRESSED = (*DEFAULT_EXCLUDED_CONTENT_TYPES, "text/html",
                  "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet")


@lru_cache(maxsize=1)
def head_revision() -> str:
    """The latest migration's revision, which a ready database's schema is at."""
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()


def _is_api(request: Request) -> bool:
    return request.url.path.startswith("/api/") or request.url.path == "/openapi.json"


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()
    settings.check_production()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        await app.state.db.open_async()
        # Jobs left running by a process that is gone are failed; on SQLite (or with
        # jobs_in_web) this process runs jobs itself (server.jobs).
        from server import jobs

        app.state.jobs = await asyncio.to_thread(jobs.start_for_web, app.state.db, settings)
        yield
        if app.state.jobs is not None:
            await asyncio.to_thread(app.state.jobs.stop)
        await app.state.db.close_async()
        app.state.db.dispose()

    app = FastAPI(
        title="LossLedger",
        version=VERSION,
        summary="Total-owning-cost evaluation of transformer tenders.",
        description=(
            "Authenticate with `POST /api/v1/token` (OAuth2 password form) and send "
            "`Authorization: Bearer <token>`. Every editable record has a `version`: send it back "
            "in a PATCH; a stale one gets 409 and nothing is overwritten."
        ),
        lifespan=lifespan,
        docs_url=None,
        redoc_url=None,
        openapi_url=None,
    )
    app.state.settings = settings
    app.state.db = Database(settings.database_url)
    _error_handlers(app)
    pages.install_page_errors(app)

    @app.get("/healthz", tags=["operations"])
    def healthz() -> dict[str, str]:
        """Liveness: the process answers."""
        return {"status": "ok", "version": VERSION}

    @app.get("/readyz", tags=["operations"],
             responses={503: {"description": "The database cannot be reached, or its schema is not the latest."}})
    def readyz() -> JSONResponse:
        """Readiness: the database answers and its schema is at the latest migration."""
        try:
            with app.state.db.engine.connect() as conn:
                found = conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalars().all()
        except Exception:  # any failure to reach the database (or a missing schema) means not ready
            log.warning("readiness check failed", exc_info=True)
            return JSONResponse({"status": "database unreachable"}, status_code=503)
        head = head_revision()
        if found != [head]:
            return JSONResponse({"status": "schema not at the latest migration", "schema": found, "expected": head},
                                status_code=503)
        return JSONResponse({"status": "ready"})

    @app.get("/openapi.json", include_in_schema=False, dependencies=[ANY_ROLE])
    def openapi_document() -> JSONResponse:
        return JSONResponse(app.openapi())

    @app.get("/docs", include_in_schema=False, dependencies=[ANY_ROLE])
    def api_docs() -> HTMLResponse:
        return HTMLResponse(
            "<!doctype html><html lang='en'><head><meta charset='utf-8'><title>LossLedger API</title>"
            "<link rel='stylesheet' href='/static/vendor/swagger-ui-5.35.0.css'></head><body>"
            "<div id='api-docs' data-openapi-url='/openapi.json'></div>"
            "<script src='/static/vendor/swagger-ui-bundle-5.35.0.js'></script>"
            "<script src='/static/js/api-docs.js'></script></body></html>"
        )

    app.include_router(api.router)
    app.include_router(pages.router)
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    # The last added runs first: the request log sees every answer, the headers reach every
    # answer, the 500 of an unhandled error is made inside them, and the body limit is checked
    # before any text in a form is.
    app.add_middleware(ControlCharacters)
    app.add_middleware(BodySizeLimit, max_bytes=settings.max_body_bytes)
    app.add_middleware(UnhandledErrors, render=unexpected_error)
    app.add_middleware(GZipMiddleware, minimum_size=1000, compresslevel=6, exclude_content_types=NOT_COMPRESSED)
    app.add_middleware(SecurityHeaders)
    app.add_middleware(RequestLog)
    return app


async def unexpected_error(request: Request, exc: Exception) -> Response:
    """The answer to an error no handler took (``server.middleware.UnhandledErrors``): logged in
    full on the server with the request id; the client sees no stack trace and no SQL."""
    request_id = request.scope.get("state", {}).get("request_id")
    log.error("unhandled error on %s %s (request %s)", request.method, request.url.path, request_id,
              exc_info=exc)
    if _is_api(request):
        return JSONResponse({"detail": "Internal error; it has been logged."}, status_code=500)
    return HTMLResponse("<h1>Something went wrong</h1><p>The error has been logged.</p>", status_code=500)


def _error_handlers(app: FastAPI) -> None:
    @app.exception_handler(NotAuthenticated)
    async def not_authenticated(request: Request, exc: NotAuthenticated):
        if _is_api(request):
            return JSONResponse({"detail": exc.message}, status_code=401, headers={"WWW-Authenticate": "Bearer"})
        target = "/login?next=" + quote(request.url.path + (f"?{request.url.query}" if request.url.query else ""))
        if request.headers.get("HX-Request"):
            return HTMLResponse("", status_code=401, headers={"HX-Redirect": target})
        return RedirectResponse(target, status_code=303)

    @app.exception_handler(InvalidField)
    async def invalid_field(request: Request, exc: InvalidField):
        if not _is_api(request):
            return pages.error_page(request, exc)
        detail = [{"loc": ["body", exc.field], "msg": exc.detail, "type": "value_error"}]
        return JSONResponse({"detail": detail}, status_code=422)

    @app.exception_handler(ValidationError)
    async def service_validation(request: Request, exc: ValidationError):
        # Raised when a service validates merged data (for example a partial cost basis edit).
        detail = [
            {"loc": ["body", *e.get("loc", ())], "msg": e.get("msg", "invalid"), "type": e.get("type", "value_error")}
            for e in exc.errors(include_url=False)
        ]
        return JSONResponse({"detail": detail}, status_code=422)

    @app.exception_handler(ServiceError)
    async def service_error(request: Request, exc: ServiceError):
        if not _is_api(request):
            return pages.error_page(request, exc)
        body: dict = {"detail": exc.message}
        if isinstance(exc, Conflict) and exc.current is not None:
            body["current"] = exc.current
        if isinstance(exc, Conflict) and exc.warnings is not None:
            body["warnings"] = exc.warnings
        if isinstance(exc, ImportRefused):
            body["problems"] = exc.problems
        headers = {"WWW-Authenticate": "Bearer"} if exc.status_code == 401 else None
        return JSONResponse(body, status_code=exc.status_code, headers=headers)

    @app.exception_handler(RequestValidationError)
    async def request_validation(request: Request, exc: RequestValidationError):
        errors = [
            {"loc": list(e.get("loc", ())), "msg": e.get("msg", "invalid"), "type": e.get("type", "value_error")}
            for e in exc.errors()
        ]
        return JSONResponse({"detail": errors}, status_code=422)
