"""JSON API: analysis of routine-test readings and the certificates of delivered units."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, File, Response, UploadFile

from server import schemas
from server.api.responses import FILE_REFUSED
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.services import test_certificates as service

router = APIRouter(tags=["factory tests"])


@router.post("/test-analysis", response_model=schemas.TestAnalysisOut, dependencies=[ANY_ROLE])
def test_analysis(data: schemas.TestAnalysisIn):
    """Equivalent circuit, figures at rated current and reference temperature, verdict and
    operating points from open- and short-circuit test readings; nothing is stored.

    The product checks figures; it does not certify a unit. Tests at these voltages are
    lethal and are done only by qualified staff under the standard and local rules.
    """
    return service.analyse(data)


@router.post("/lots/{lot_id}/test-certificates", status_code=201, response_model=schemas.CertificateOut,
             dependencies=[BUYER])
def add_certificate(lot_id: schemas.PathId, data: schemas.CertificateIn, session: SessionDep):
    """A delivered unit's certificate, checked against the awarded offer's guarantees."""
    return service.certificate_out(service.add_certificate(session, lot_id, data))


@router.get("/lots/{lot_id}/test-certificates", response_model=list[schemas.CertificateOut], dependencies=[ANY_ROLE])
def list_certificates(lot_id: schemas.PathId, session: SessionDep):
    return [service.certificate_out(c) for c in service.list_certificates(session, lot_id)]


@router.post("/lots/{lot_id}/test-certificates/import", status_code=201, response_model=list[schemas.CertificateOut],
             dependencies=[BUYER], responses=FILE_REFUSED)
def import_certificates(lot_id: schemas.PathId, session: SessionDep,
                        file: Annotated[UploadFile, File(description="CSV or XLSX, one certificate per row")]):
    """Many certificates from one file; a file with any bad row stores nothing."""
    return [service.certificate_out(c) for c in
            service.import_certificates(session, lot_id, file.filename or "", file.file.read())]


@router.get("/lots/{lot_id}/test-certificates/template.csv", dependencies=[ANY_ROLE], response_class=Response,
            responses={200: {"content": {"text/csv": {}}, "description": "The import file's header row."}})
def certificate_template_csv(lot_id: schemas.PathId, session: SessionDep):
    """The columns the certificate import accepts, as a CSV header with no rows (an awarded lot only)."""
    return Response(service.template_csv(session, lot_id), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="lot-{lot_id}-certificates.csv"'})


@router.get("/lots/{lot_id}/test-certificates/template.xlsx", dependencies=[ANY_ROLE], response_class=Response,
            responses={200: {"content": {service.XLSX_MEDIA_TYPE: {}},
                             "description": "The import workbook: the header, and a sheet describing each column."}})
def certificate_template_xlsx(lot_id: schemas.PathId, session: SessionDep):
    """The certificate import's columns as a workbook; the second sheet explains them with invented examples."""
    return Response(service.template_xlsx(session, lot_id), media_type=service.XLSX_MEDIA_TYPE,
                    headers={"Content-Disposition": f'attachment; filename="lot-{lot_id}-certificates.xlsx"'})


@router.get("/lots/{lot_id}/test-certificates/summary", response_model=schemas.CertificateSummaryOut,
            dependencies=[ANY_ROLE])
def certificate_summary(lot_id: schemas.PathId, session: SessionDep):
    """Units tested, mean and worst deviation per loss, rejected units, and the total penalty of the
    accepted units (a rejected unit is sent back and owes none)."""
    return service.lot_summary(session, lot_id)
