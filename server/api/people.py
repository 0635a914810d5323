"""JSON API: tokens, the current user, and user administration."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request, Response
from fastapi.security import OAuth2PasswordRequestForm

from server import schemas
from server.auth import ADMIN, ANY_ROLE, client_address
from server.deps import SessionDep
from server.services import users as service

router = APIRouter(tags=["people"])


@router.post("/token", response_model=schemas.TokenOut)
def issue_token(form: Annotated[OAuth2PasswordRequestForm, Depends()], request: Request, session: SessionDep):
    """Exchange a user name and password (OAuth2 password form) for a bearer token."""
    settings = request.app.state.settings
    token, stored = service.log_in(session, settings, form.username, form.password, client_address(request), "api")
    return schemas.TokenOut(access_token=token, expires_in=settings.token_minutes * 60)


@router.post("/token/revoke", status_code=204, dependencies=[ANY_ROLE])
def revoke_token(request: Request, session: SessionDep):
    """End the session or token this request was made with."""
    service.revoke(session, request.state.principal.session_id, request.state.actor)
    return Response(status_code=204)


@router.get("/me", response_model=schemas.MeOut, dependencies=[ANY_ROLE])
def me(request: Request):
    principal = request.state.principal
    return schemas.MeOut(username=principal.username, roles=sorted(principal.roles), kind=principal.kind)


@router.get("/users", response_model=list[schemas.UserOut], dependencies=[ADMIN])
def list_users(session: SessionDep):
    return service.list_users(session)


@router.post("/users", status_code=201, response_model=schemas.UserOut, dependencies=[ADMIN])
def create_user(data: schemas.UserCreate, session: SessionDep):
    return service.create_user(session, data.username, data.password, list(data.roles))


@router.patch("/users/{user_id}", response_model=schemas.UserOut, dependencies=[ADMIN])
def patch_user(user_id: schemas.PathId, patch: schemas.UserPatch, session: SessionDep):
    return service.patch_user(session, user_id, patch)
