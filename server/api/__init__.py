"""The JSON API under /api/v1: the contract other programs use."""

from fastapi import APIRouter
from starlette.routing import Match
from starlette.types import Scope

from server.api import (
    cost_bases,
    factory_tests,
    fleet,
    intake,
    load_shapes,
    offers,
    people,
    records,
    robustness,
    tenders,
)
from server.api.responses import ERRORS


class _PrefixRouter(APIRouter):
    """An APIRouter that turns away a path outside its prefix at once, instead of trying each
    of its routes in turn (FastAPI asks an included router's ``matches`` before its routes):
    a page request then skips the whole API."""

    def matches(self, scope: Scope) -> tuple[Match, Scope]:
        path, root = scope.get("path", ""), scope.get("root_path", "")
        path = path[len(root):] if root and path.startswith(root) else path
        if path != self.prefix and not path.startswith(self.prefix + "/"):
            return Match.NONE, {}
        return super().matches(scope)


router = _PrefixRouter(prefix="/api/v1", responses=ERRORS)
router.include_router(people.router)
router.include_router(cost_bases.router)
router.include_router(load_shapes.router)
router.include_router(tenders.router)
router.include_router(offers.router)
router.include_router(records.router)
router.include_router(intake.router)
router.include_router(factory_tests.router)
router.include_router(fleet.router)
router.include_router(robustness.router)
