"""Server-rendered pages for people (htmx for in-place edits)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from server.errors import ServiceError

router = APIRouter(include_in_schema=False)


def wants_page(request: Request) -> bool:
    return not request.url.path.startswith("/api/")


def error_page(request: Request, exc: ServiceError) -> HTMLResponse:
    return HTMLResponse(f"<p>{exc.message}</p>", status_code=exc.status_code)
