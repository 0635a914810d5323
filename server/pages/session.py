"""Pages: log in and log out (a signed session cookie; forms carry the session's CSRF token)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Request
from fastapi.responses import RedirectResponse

from server.auth import ANY_ROLE, Forbidden, client_address, same_origin
from server.deps import SessionDep
from server.pages.forms import FormDep
from server.pages.templating import render
from server.security import SESSION_COOKIE, sign_cookie, unsign_cookie
from server.services import pages_support, users
from server.services.users import LoginRefused

router = APIRouter()


def _local(target: str | None) -> str:
    """Only a path on this site is a place to return to after logging in."""
    if not target or not target.startswith("/") or target.startswith("//") or "\\" in target:
        return "/tenders"
    return target


@router.get("/login")
def login_form(request: Request, target: Annotated[str | None, Query(alias="next")] = None):
    return render(request, "login.html", {"form": {"next": _local(target)}, "error": None})


@router.post("/login")
def log_in(request: Request, session: SessionDep, form: FormDep):
    """A fresh session at every log-in; the one the browser's old cookie named is revoked."""
    # The log-in form has no session to carry a token yet, so another site could post it
    # (log-in CSRF: the victim works signed in as the attacker). Its Origin gives it away.
    if not same_origin(request):
        raise Forbidden("This log-in came from another site and was refused.")
    settings = request.app.state.settings
    target = _local(form.get("next"))
    old_token = unsign_cookie(settings.secret_key, request.cookies.get(SESSION_COOKIE))
    try:
        token, _ = pages_support.log_in_replacing(
            session, settings, form.get("username", ""), form.get("password", ""), client_address(request), old_token
        )
    except LoginRefused as exc:
        # The service's own words: a lock-out says so and for how long. The name goes back into
        # the box only as far as a user name can be long, however much was typed.
        typed = form.get("username", "")[:users.MAX_NAME_CHARS]
        context = {"form": {"username": typed, "next": target}, "error": exc.message}
        return render(request, "login.html", context, status_code=401)
    response = RedirectResponse(target, status_code=303)
    response.set_cookie(
        SESSION_COOKIE,
        sign_cookie(settings.secret_key, token),
        max_age=settings.session_max_hours * 3600,
        httponly=True,
        samesite="lax",
        # Behind a proxy that ends TLS the scheme reads "http", so production always insists.
        secure=request.url.scheme == "https" or settings.env == "production",
        path="/",
    )
    return response


@router.post("/logout", dependencies=[ANY_ROLE])
def log_out(request: Request, session: SessionDep):
    users.revoke(session, request.state.principal.session_id, request.state.actor)
    response = RedirectResponse("/login", status_code=303)
    response.delete_cookie(SESSION_COOKIE, path="/")
    return response
