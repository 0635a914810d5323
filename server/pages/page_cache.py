"""Whole rendered pages kept per data generation, with the viewer's own bits put in per request.

A page is rendered once for a set of roles with placeholders for the user name and the form
token, then served to every viewer with those roles until the data generation moves
(``server.storage.generation``). Reading a lot page then costs a query and a string replace.
"""

from __future__ import annotations

import dataclasses
import secrets
from collections.abc import Callable
from html import escape

from fastapi import Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.storage.generation import GenerationCache

# Plain letters and digits, so that HTML escaping and JSON encoding (the token also sits in the
# page's hx-headers attribute) leave them unchanged and one replace finds every copy.
_USER = "viewername" + secrets.token_hex(12)
_TOKEN = "viewertoken" + secrets.token_hex(12)
_PAGES = GenerationCache(size=128)


def cached_page(request: Request, session: Session, key: tuple, render: Callable[[], HTMLResponse]) -> HTMLResponse:
    principal = getattr(request.state, "principal", None)
    if principal is None:
        return render()
    roles = tuple(sorted(principal.roles))

    def render_for_roles() -> tuple[int, str]:
        request.state.principal = dataclasses.replace(principal, username=_USER, csrf_token=_TOKEN)
        try:
            response = render()
        finally:
            request.state.principal = principal
        return response.status_code, response.body.decode()

    status, body = _PAGES.get_or_compute(session, (key, roles, bool(request.headers.get("HX-Request"))),
                                         render_for_roles)
    body = body.replace(_USER, escape(principal.username)).replace(_TOKEN, principal.csrf_token or "")
    return HTMLResponse(body, status_code=status)
