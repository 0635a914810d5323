"""Server-rendered pages for people (htmx for in-place edits).

``server.app`` uses ``router``, ``wants_page``, ``error_page`` and ``install_page_errors``.
"""

from __future__ import annotations

from fastapi import APIRouter, FastAPI, Request
from fastapi.exception_handlers import http_exception_handler
from fastapi.responses import HTMLResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from server.auth import Requires
from server.errors import ServiceError
from server.pages import (
    audit,
    awards,
    certificates,
    cost_bases,
    fleet,
    intake,
    limit_tables,
    load_shapes,
    loading,
    lots,
    people,
    revisions,
    robustness,
    session,
    tenders,
)
from server.pages.templating import is_htmx, render

router = APIRouter(include_in_schema=False)
router.include_router(session.router)
router.include_router(tenders.router)
router.include_router(lots.router)
router.include_router(cost_bases.router)
router.include_router(audit.router)
router.include_router(awards.router)
router.include_router(people.router)
router.include_router(intake.router)
router.include_router(limit_tables.router)
router.include_router(load_shapes.router)
router.include_router(loading.router)
router.include_router(revisions.router)
router.include_router(certificates.router)
router.include_router(fleet.router)
router.include_router(robustness.router)

_TITLES = {
    403: "Not allowed", 404: "Not found", 405: "Not found", 409: "Cannot change this now", 422: "Cannot accept this",
}
# Unknown addresses answered with a page; other HTTP errors keep FastAPI's plain answer.
_PAGE_STATUSES = {404, 405}


def wants_page(request: Request) -> bool:
    return not request.url.path.startswith("/api/")


def error_page(request: Request, exc: ServiceError) -> HTMLResponse:
    """A plain explanation for people; htmx gets the message alone, shown in the page's notice area."""
    title = _TITLES.get(exc.status_code, "Something went wrong")
    context = {"status": exc.status_code, "title": title, "message": exc.message}
    if is_htmx(request):
        headers = {"HX-Retarget": "#notice", "HX-Reswap": "innerHTML"}
        return render(request, "_error_notice.html", context, exc.status_code, headers)
    return render(request, "error.html", context, exc.status_code)


class _NoPage(ServiceError):
    def __init__(self, status_code: int) -> None:
        super().__init__("There is no page at this address. It may have been mistyped, or the link may be old.")
        self.status_code = status_code


def install_page_errors(app: FastAPI) -> None:
    """Answer an address no route matches with the friendly error page (the JSON API, the
    OpenAPI document and static files keep their plain answers)."""

    @app.exception_handler(StarletteHTTPException)
    async def no_such_page(request: Request, exc: StarletteHTTPException):
        path = request.url.path
        if exc.status_code not in _PAGE_STATUSES or not wants_page(request) or path.startswith("/static/"):
            return await http_exception_handler(request, exc)
        try:
            # No route ran, so nobody checked who is asking: do it here so that a signed-in
            # person keeps the navigation. A stranger gets the same page without it.
            await Requires()(request)
        except ServiceError:
            pass
        return error_page(request, _NoPage(exc.status_code))
