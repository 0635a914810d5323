"""Application factory: wires settings, database, routes and error handling."""

from __future__ import annotations

from contextlib import asynccontextmanager
from pathlib import Path

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from fastapi.staticfiles import StaticFiles
from pydantic import ValidationError

from server import api, pages
from server.errors import Conflict, InvalidField, ServiceError
from server.settings import Settings, get_settings
from server.storage.database import Database

STATIC_DIR = Path(__file__).resolve().parents[1] / "static"
VERSION = "0.1.0"


def _validation_payload(errors: list[dict], prefix: tuple = ("body",)) -> list[dict]:
    return [
        {"loc": [*prefix, *err.get("loc", ())], "msg": err.get("msg", "invalid"), "type": err.get("type", "value_error")}
        for err in errors
    ]


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        yield
        app.state.db.dispose()

    app = FastAPI(
        title="LossLedger",
        version=VERSION,
        summary="Total-owning-cost evaluation of transformer tenders.",
        lifespan=lifespan,
    )
    app.state.settings = settings
    app.state.db = Database(settings.database_url)

    @app.exception_handler(InvalidField)
    async def invalid_field(request: Request, exc: InvalidField):
        if pages.wants_page(request):
            return pages.error_page(request, exc)
        detail = [{"loc": ["body", exc.field], "msg": exc.detail, "type": "value_error"}]
        return JSONResponse({"detail": detail}, status_code=422)

    @app.exception_handler(ValidationError)
    async def service_validation(request: Request, exc: ValidationError):
        # Raised when a service validates merged data (for example a partial cost basis edit).
        return JSONResponse({"detail": _validation_payload(exc.errors(include_url=False))}, status_code=422)

    @app.exception_handler(ServiceError)
    async def service_error(request: Request, exc: ServiceError):
        if pages.wants_page(request):
            return pages.error_page(request, exc)
        body: dict = {"detail": exc.message}
        if isinstance(exc, Conflict) and exc.current is not None:
            body["current"] = exc.current
        return JSONResponse(body, status_code=exc.status_code)

    @app.exception_handler(RequestValidationError)
    async def request_validation(request: Request, exc: RequestValidationError):
        errors = [
            {"loc": list(e.get("loc", ())), "msg": e.get("msg", "invalid"), "type": e.get("type", "value_error")}
            for e in exc.errors()
        ]
        return JSONResponse({"detail": errors}, status_code=422)

    @app.get("/healthz", tags=["operations"])
    def healthz() -> dict[str, str]:
        return {"status": "ok", "version": VERSION}

    app.include_router(api.router)
    app.include_router(pages.router)
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    return app
