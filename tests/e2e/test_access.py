"""Who may call what: every route is closed to strangers and to users without the role.

The route-table test walks the application's routes, so a route added later without a
``Requires`` dependency fails here instead of shipping open.
"""

from __future__ import annotations

import re

import pytest
from fastapi.routing import APIRoute

from server.app import create_app
from server.auth import Requires
from server.settings import Settings
from server.storage.models import ROLES
from tests.conftest import add_user_with_token, auth, make_client

# Routes anyone may call: logging in, the token endpoint, health and readiness, static files.
PUBLIC = {("GET", "/login"), ("POST", "/login"), ("POST", "/api/v1/token"), ("GET", "/healthz"), ("GET", "/readyz")}


def _requires(dependant) -> list[Requires]:
    found = []
    for dep in dependant.dependencies:
        if isinstance(dep.call, Requires):
            found.append(dep.call)
        found.extend(_requires(dep))
    return found


def _flatten(routes):
    """(full path, APIRoute) for every route, including those of included routers."""
    for route in routes:
        if isinstance(route, APIRoute):
            yield route.path, route
        elif hasattr(route, "effective_route_contexts"):  # how FastAPI keeps an included router
            for context in route.effective_route_contexts():
                if isinstance(context.original_route, APIRoute):
                    yield context.path, context.original_route


def _routes():
    app = create_app(Settings(database_url="sqlite://", env="test"))
    for path, route in _flatten(app.routes):
        for method in sorted(route.methods - {"HEAD"}):
            yield method, path, route


def _concrete(path: str) -> str:
    return re.sub(r"\{[^}]+\}", "1", path)


def test_every_route_declares_who_may_call_it():
    routes = list(_routes())
    assert len(routes) > 40, "the walk must see the routes of the included routers"
    unguarded = [
        f"{method} {path}" for method, path, route in routes
        if (method, path) not in PUBLIC and not _requires(route.dependant)
    ]
    assert unguarded == [], f"routes without a Requires dependency: {unguarded}"


ROUTES = [(m, p, sorted(_requires(r.dependant)[0].roles) if _requires(r.dependant) else None)
          for m, p, r in _routes() if (m, p) not in PUBLIC]


@pytest.mark.parametrize(("method", "path", "roles"), ROUTES, ids=[f"{m} {p}" for m, p, _ in ROUTES])
def test_anonymous_and_wrong_role_are_refused(sqlite_url, method, path, roles):
    url = _concrete(path)
    with make_client(sqlite_url) as client:
        anon = client.request(method, url, follow_redirects=False)
        if path.startswith("/api/") or path in ("/openapi.json",):
            assert anon.status_code == 401, (method, path, anon.status_code)
            assert anon.headers.get("www-authenticate") == "Bearer"
        else:
            assert anon.status_code == 303 and anon.headers["location"].startswith("/login"), (method, path)
        others = [r for r in ROLES if r not in roles] if roles else []
        headers = add_user_with_token(sqlite_url, "lacks-role", others)
        wrong = client.request(method, url, headers=headers, follow_redirects=False)
        assert wrong.status_code == 403, (method, path, roles, wrong.status_code, wrong.text[:200])


def test_bearer_token_login_revoke(client, anon_client):
    r = anon_client.post("/api/v1/token", data={"username": "buyer", "password": "correct horse battery"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["token_type"] == "bearer" and body["expires_in"] > 0
    headers = {"Authorization": f"Bearer {body['access_token']}"}
    assert anon_client.get("/api/v1/me", headers=headers).json()["roles"] == ["buyer"]
    assert anon_client.post("/api/v1/token/revoke", headers=headers).status_code == 204
    assert anon_client.get("/api/v1/me", headers=headers).status_code == 401


def test_wrong_password_is_401_and_audited(client, anon_client):
    r = anon_client.post("/api/v1/token", data={"username": "buyer", "password": "wrong password!"})
    assert r.status_code == 401
    events = client.get("/api/v1/audit", params={"actor": "buyer"}).json()
    assert [e["action"] for e in events] == ["login_failed"]


def test_ten_wrong_passwords_lock_the_account(client, anon_client):
    for _ in range(10):
        r = anon_client.post("/api/v1/token", data={"username": "planner", "password": "wrong password!"})
        assert r.status_code == 401
    locked = anon_client.post("/api/v1/token", data={"username": "planner", "password": "correct horse battery"})
    assert locked.status_code == 401
    assert "Too many failed log-ins" in locked.json()["detail"]
    actions = [e["action"] for e in client.get("/api/v1/audit", params={"actor": "planner"}).json()]
    assert actions.count("login_failed") == 10
    assert "lockout" in actions and "login_locked" in actions
    # Another account from the same address is not locked by these ten failures.
    other = anon_client.post("/api/v1/token", data={"username": "buyer", "password": "correct horse battery"})
    assert other.status_code == 200


def test_disabled_user_loses_access(client):
    users = {u["username"]: u for u in client.get("/api/v1/users").json()}
    viewer = users["viewer"]
    r = client.patch(f"/api/v1/users/{viewer['id']}", json={"version": viewer["version"], "disabled": True})
    assert r.status_code == 200 and r.json()["disabled"] is True
    assert client.get("/api/v1/me", headers=auth("viewer")).status_code == 401


def test_user_admin_needs_admin(client):
    r = client.get("/api/v1/users", headers=auth("buyer"))
    assert r.status_code == 403
    created = client.post("/api/v1/users", json={"username": "gail", "password": "x" * 12, "roles": ["viewer"]})
    assert created.status_code == 201
    assert "password" not in created.json() and "password_hash" not in created.json()
    bad = client.post("/api/v1/users", json={"username": "hal", "password": "x" * 12, "roles": ["emperor"]})
    assert bad.status_code == 422


def test_security_headers_and_no_stack_traces(client):
    r = client.get("/api/v1/tenders")
    csp = r.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "unsafe-inline" not in csp.split("script-src")[1].split(";")[0]
    assert r.headers["x-content-type-options"] == "nosniff"
    assert r.headers["x-frame-options"] == "DENY"
    assert r.headers["referrer-policy"] == "same-origin"
    assert "frame-ancestors 'none'" in csp


def test_body_size_limit(client):
    r = client.post("/api/v1/cost-bases", content=b"x" * 6_000_000, headers={"content-type": "application/json"})
    assert r.status_code == 413


def test_production_refuses_default_secret():
    with pytest.raises(RuntimeError, match="SECRET_KEY"):
        create_app(Settings(database_url="sqlite://", env="production"))
