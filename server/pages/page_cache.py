"""Whole rendered pages kept per data version, with the viewer's own bits put in per request.

A page is rendered once for a set of roles with placeholders for the user name and the form
token, then served to every viewer with those roles until the data version moves
(``server.storage.generation``). Reading a lot page then costs no query of its own (the
version comes with the user's session, see ``server.auth``) and a replace.
"""

from __future__ import annotations

import dataclasses
import re
import secrets
from collections.abc import Callable
from html import escape

from fastapi import Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.deps import cached
from server.storage.generation import GenerationCache

# Plain letters and digits, so that HTML escaping and JSON encoding (the token also sits in the
# page's hx-headers attribute) leave them unchanged and one pattern finds every copy.
_USER = "viewername" + secrets.token_hex(12)
_TOKEN = "viewertoken" + secrets.token_hex(12)
_PLACEHOLDERS = re.compile(f"({_USER}|{_TOKEN})".encode())
_PAGES = GenerationCache(size=128)


async def cached_page(request: Request, key: tuple, render: Callable[[Session], HTMLResponse]) -> HTMLResponse:
    """The page for ``key`` (rendered from the session ``render`` is given), rendered in a worker
    thread only when this data version has not been rendered yet for the viewer's roles; a hit
    is served on the event loop with no I/O (``server.deps.cached``)."""
    principal = request.state.principal  # set by server.auth.Requires
    roles = tuple(sorted(principal.roles))

    def render_for_roles(session: Session) -> tuple[int, list[bytes]]:
        request.state.principal = dataclasses.replace(principal, username=_USER, csrf_token=_TOKEN)
        try:
            response = render(session)
        finally:
            request.state.principal = principal
        # Split at the placeholders (kept at the odd places), so a viewer's page is one join.
        return response.status_code, _PLACEHOLDERS.split(bytes(response.body))

    status, parts = await cached(request, _PAGES, (key, roles, bool(request.headers.get("HX-Request"))),
                                 render_for_roles)
    own = {_USER.encode(): escape(principal.username).encode(), _TOKEN.encode(): (principal.csrf_token or "").encode()}
    body = b"".join(own[part] if k % 2 else part for k, part in enumerate(parts))
    return HTMLResponse(body, status_code=status)
