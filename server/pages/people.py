"""Pages: user administration (accounts, roles, disabling, new passwords) for administrators."""

from __future__ import annotations

from typing import Any
from urllib.parse import quote

from fastapi import APIRouter, Request
from pydantic import ValidationError

from server import schemas
from server.auth import ADMIN
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import views
from server.pages.forms import FormDep, FormListsDep, field_errors
from server.pages.templating import render, see_other
from server.services import pages_support
from server.services import users as service
from server.storage.models import ROLES

router = APIRouter()

ROLE_CHOICES = [(role, role.capitalize()) for role in ROLES]


def _page(session, **extra: Any) -> dict[str, Any]:
    return {"users": service.list_users(session), "roles": ROLE_CHOICES, "new_form": {}, "new_errors": {},
            "user_errors": {}, "conflicts": {}} | extra


def _patch(form: dict[str, str], roles: list[str]) -> dict[str, Any]:
    """What one of a user's forms asks for; each form names its change."""
    data: dict[str, Any] = {"version": form.get("version", "")}
    change = form.get("change")
    if change == "roles":
        data["roles"] = roles
    elif change in ("disable", "enable"):
        data["disabled"] = change == "disable"
    elif change == "password":
        data["password"] = form.get("password", "")
    return data


@router.get("/users", dependencies=[ADMIN])
def user_list(request: Request, session: SessionDep, saved: str | None = None):
    return render(request, "users/list.html", _page(session, saved=saved))


@router.post("/users", dependencies=[ADMIN])
def create_user(request: Request, session: SessionDep, form: FormDep, lists: FormListsDep):
    roles = lists.get("roles", [])
    try:
        data = schemas.UserCreate.model_validate(
            {"username": form.get("username", ""), "password": form.get("password", ""), "roles": roles}
        )
        user = service.create_user(session, data.username, data.password, list(data.roles))
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    else:
        return see_other(request, f"/users?saved={quote(user.username)}#user-{user.id}")
    # The password is never sent back into the form.
    new_form = {"username": form.get("username", ""), "roles": roles}
    return render(request, "users/list.html", _page(session, new_form=new_form, new_errors=errors), 422)


@router.post("/users/{user_id:int}", dependencies=[ADMIN])
def change_user(request: Request, user_id: schemas.PathId, session: SessionDep, form: FormDep, lists: FormListsDep):
    """Roles, disable or enable, or a new password (which ends the user's sessions)."""
    acting = request.state.principal.user_id
    try:
        patch = schemas.UserPatch.model_validate(_patch(form, lists.get("roles", [])))
        user = pages_support.patch_user_as(session, acting, user_id, patch)
    except ValidationError as exc:
        context, status = {"user_errors": {user_id: field_errors(exc)}}, 422
    except InvalidField as exc:
        views.discard(session)
        context, status = {"user_errors": {user_id: {exc.field: exc.detail}}}, 422
    except Conflict as exc:
        views.discard(session)
        context, status = {"conflicts": {user_id: exc.message}}, 409
    else:
        return see_other(request, f"/users?saved={quote(user.username)}#user-{user.id}")
    return render(request, "users/list.html", _page(session, **context), status)
