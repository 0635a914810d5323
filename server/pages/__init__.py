"""Server-rendered pages for people (htmx for in-place edits).

``server.app`` uses ``router``, ``wants_page`` and ``error_page``.
"""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from server.errors import ServiceError
from server.pages import cost_bases, lots, session, tenders
from server.pages.templating import is_htmx, render

router = APIRouter(include_in_schema=False)
router.include_router(session.router)
router.include_router(tenders.router)
router.include_router(lots.router)
router.include_router(cost_bases.router)

_TITLES = {403: "Not allowed", 404: "Not found", 409: "Cannot change this now", 422: "Cannot accept this"}


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
