"""JSON API: offer imports, compliance, limit tables, efficiency curves and the XLSX ranking."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, File, Form, Query, Response, UploadFile

from server import schemas
from server.api.responses import FILE_REFUSED
from server.auth import ANY_ROLE, BUYER, PLANNER
from server.deps import SessionDep
from server.services import compliance, offer_imports, ranking
from server.services.efficiency_curves import lot_efficiency_curves
from server.services.tenders import get_lot

router = APIRouter()
XLSX = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"


@router.get("/tenders/{tender_id}/offer-template.csv", dependencies=[ANY_ROLE], tags=["offer import"],
            response_class=Response, responses={200: {"content": {"text/csv": {}}, "description": "Template"}})
def offer_template(tender_id: schemas.PathId, session: SessionDep):
    """The import template: one row per offer per lot, columns named after the offer fields."""
    return Response(offer_imports.template_csv(session, tender_id), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="tender-{tender_id}-offers.csv"'})


@router.post("/tenders/{tender_id}/offer-imports", status_code=201, response_model=schemas.OfferImportOut,
             dependencies=[BUYER], tags=["offer import"], responses=FILE_REFUSED)
def stage_offer_import(tender_id: schemas.PathId, session: SessionDep,
                       file: Annotated[UploadFile, File(description="CSV or XLSX with the template's columns")],
                       rows_limit: Annotated[int | None, Query(ge=0)] = None):
    """Upload and check a file: every row with its errors and warnings; nothing is applied yet."""
    staged = offer_imports.stage_import(session, tender_id, file.filename or "", file.file.read())
    return offer_imports.import_out(staged, rows_limit)


@router.get("/offer-imports/{import_id}", response_model=schemas.OfferImportOut, dependencies=[ANY_ROLE],
            tags=["offer import"])
def get_offer_import(import_id: schemas.PathId, session: SessionDep, rows_limit: Annotated[int | None, Query(ge=0)] = None):
    return offer_imports.import_out(offer_imports.get_import(session, import_id), rows_limit)


@router.post("/offer-imports/{import_id}/commit", response_model=schemas.OfferImportOut, dependencies=[BUYER],
             tags=["offer import"])
def commit_offer_import(import_id: schemas.PathId, session: SessionDep):
    """Apply every row of a preview without errors, in one transaction; or nothing."""
    return offer_imports.import_out(offer_imports.commit_import(session, import_id), rows_limit=0)


@router.get("/lots/{lot_id}/compliance", response_model=list[schemas.OfferComplianceOut], dependencies=[ANY_ROLE],
            tags=["compliance"])
def lot_compliance(lot_id: schemas.PathId, session: SessionDep):
    """Per offer: compliant or not, every rule checked with its limit, value and source, and warnings."""
    return compliance.lot_compliance(session, get_lot(session, lot_id))


@router.get("/limit-tables", response_model=list[schemas.LimitTableOut], dependencies=[ANY_ROLE], tags=["compliance"])
def list_limit_tables(session: SessionDep):
    """Built-in regulatory tables and the users' own, with their source and status."""
    return compliance.list_tables(session)


@router.post("/limit-tables", status_code=201, response_model=schemas.LimitTableOut, dependencies=[PLANNER],
             tags=["compliance"])
def create_limit_table(data: schemas.LimitTableCreate, session: SessionDep):
    row = compliance.create_table(session, data)
    return compliance.table_out(compliance.user_table(row), row)


@router.post("/limit-tables/import", status_code=201, response_model=schemas.LimitTableOut, dependencies=[PLANNER],
             tags=["compliance"], responses=FILE_REFUSED)
def import_limit_table(
    session: SessionDep,
    key: Annotated[str, Form()],
    name: Annotated[str, Form()],
    source: Annotated[str, Form()],
    kind: Annotated[str, Form()],
    file: Annotated[UploadFile, File(description="CSV/XLSX: rating_kva and max_no_load_loss_w, max_load_loss_w or min_pct")],
    phases: Annotated[int | None, Form()] = None,
    insulation: Annotated[str | None, Form()] = None,
    per_unit_load: Annotated[float, Form()] = 0.5,
):
    """A user-defined limit table (a utility's own specification) from a file."""
    meta = {"key": key, "name": name, "source": source, "kind": kind, "phases": phases, "insulation": insulation,
            "per_unit_load": per_unit_load}
    row = compliance.import_table(session, meta, file.filename or "", file.file.read())
    return compliance.table_out(compliance.user_table(row), row)


@router.patch("/limit-tables/{key}", response_model=schemas.LimitTableOut, dependencies=[PLANNER], tags=["compliance"])
def patch_limit_table(key: str, patch: schemas.LimitTablePatch, session: SessionDep):
    row = compliance.patch_table(session, key, patch)
    return compliance.table_out(compliance.user_table(row), row)


@router.get("/rules", response_model=list[schemas.RuleOut], dependencies=[ANY_ROLE], tags=["compliance"])
def list_rules(session: SessionDep):
    """Every built-in rule (limit tables, tolerances, constants): where it is written, its status, its reviews."""
    return compliance.list_rules(session)


@router.post("/rules/{rule_id}/review", response_model=schemas.RuleOut, dependencies=[PLANNER], tags=["compliance"])
def review_rule(rule_id: str, data: schemas.RuleReviewIn, session: SessionDep):
    """Record that a built-in rule was checked against a document (required to mark it verified); audited."""
    return compliance.review_rule(session, rule_id, data)


@router.post("/limit-tables/{key}/review", response_model=schemas.LimitTableOut, dependencies=[PLANNER],
             tags=["compliance"])
def review_limit_table(key: str, data: schemas.TableReviewIn, session: SessionDep):
    """Review every built-in table of family ``key`` at once (one table: ``POST /rules/{table_id}/review``).

    Marking them verified needs the ``document`` checked against."""
    return compliance.review_built_in(session, key, data)


@router.get("/lots/{lot_id}/efficiency-curves", response_model=schemas.EfficiencyCurvesOut, dependencies=[ANY_ROLE],
            tags=["offers and ranking"])
def efficiency_curves(lot_id: schemas.PathId, session: SessionDep):
    """Efficiency of every offer from 0 to 150 % loading, its maximum, and the regulatory points."""
    return lot_efficiency_curves(session, lot_id)


@router.get("/lots/{lot_id}/ranking.xlsx", dependencies=[ANY_ROLE], tags=["offers and ranking"],
            response_class=Response, responses={200: {"content": {XLSX: {}}, "description": "The ranking workbook."}})
def ranking_workbook(lot_id: schemas.PathId, session: SessionDep, include_non_compliant: bool = True):
    return Response(ranking.ranking_workbook(session, lot_id, include_non_compliant), media_type=XLSX,
                    headers={"Content-Disposition": f'attachment; filename="lot-{lot_id}-ranking.xlsx"'})
