"""The JSON API under /api/v1: the contract other programs use."""

from fastapi import APIRouter

from server.api import cost_bases, factory_tests, fleet, intake, load_shapes, offers, people, records, robustness, tenders
from server.api.responses import ERRORS

router = APIRouter(prefix="/api/v1", responses=ERRORS)
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
