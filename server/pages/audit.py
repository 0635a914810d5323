"""Pages: the audit trail with its filters, and the history of one tender, lot or offer."""

from __future__ import annotations

from datetime import UTC, date, datetime, time
from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse
from pydantic import BaseModel, ConfigDict, Field, StringConstraints, ValidationError, field_validator, model_validator
from pydantic_core import PydanticCustomError

from server import schemas
from server.auth import ANY_ROLE
from server.deps import SessionDep
from server.pages.forms import field_errors
from server.pages.history import object_name
from server.pages.templating import is_htmx, render
from server.services import audit_log
from server.services.pages_support import AUDITED_TYPES

router = APIRouter()

# The page shows this many events; the CSV holds up to audit_log.MAX_ROWS.
PAGE_ROWS = 200
HISTORY_ROWS = 50


class AuditFilter(BaseModel):
    """The audit page's filter boxes; the dates are whole days in UTC."""

    model_config = ConfigDict(extra="ignore")

    object_type: str | None = None
    object_id: Annotated[int, Field(ge=1, le=schemas.MAX_ID)] | None = None
    actor: Annotated[str, StringConstraints(strip_whitespace=True, max_length=64)] | None = None
    since: date | None = None
    until: date | None = None

    @field_validator("object_type")
    @classmethod
    def _known(cls, value: str | None) -> str | None:
        if value is not None and value not in AUDITED_TYPES:
            raise PydanticCustomError("unknown_type", "choose one of the listed kinds")
        return value

    @model_validator(mode="after")
    def _in_order(self) -> AuditFilter:
        if self.since and self.until and self.until < self.since:
            raise PydanticCustomError("dates_reversed", "must be on or after the from date")
        return self

    def query(self) -> dict[str, Any]:
        """The filter as ``audit_log.list_events`` (and the JSON API) take it."""
        return {
            "object_type": self.object_type,
            "object_id": self.object_id,
            "actor": self.actor or None,
            "since": datetime.combine(self.since, time.min, UTC) if self.since else None,
            "until": datetime.combine(self.until, time.max, UTC) if self.until else None,
        }


def csv_url(query: dict[str, Any]) -> str:
    """The CSV download of the same events."""
    params = {k: v.isoformat() if isinstance(v, datetime) else v for k, v in query.items() if v is not None}
    return "/api/v1/audit.csv" + (f"?{urlencode(params)}" if params else "")


def audit_url(object_type: str, object_id: int) -> str:
    return "/audit?" + urlencode({"object_type": object_type, "object_id": object_id})


@router.get("/audit", dependencies=[ANY_ROLE])
def audit_trail(request: Request, session: SessionDep):
    """Newest first; the filter is a plain GET form, so a filtered view is a link to share."""
    form = {key: value.strip() for key, value in request.query_params.items()}
    context: dict[str, Any] = {
        "form": form,
        "types": [("", "Any kind")] + [(t, object_name(t)) for t in AUDITED_TYPES],
        "limit": PAGE_ROWS,
        "csv_limit": audit_log.MAX_ROWS,
    }
    try:
        chosen = AuditFilter.model_validate({k: v for k, v in form.items() if v})
    except ValidationError as exc:
        # A reversed date range is reported on the model; it belongs beside the "to" box.
        errors = {("until" if k == "form" else k): v for k, v in field_errors(exc).items()}
        return render(request, "audit/list.html", context | {"errors": errors, "events": None}, 422)
    query = chosen.query()
    events = audit_log.list_events(session, **query, limit=PAGE_ROWS)
    filtered = any(v is not None for v in query.values())
    return render(request, "audit/list.html", context | {
        "errors": {}, "events": events, "csv_url": csv_url(query), "filtered": filtered,
    })


def _history(request: Request, session, object_type: str, object_id: int, template: str):
    """A history partial for htmx; without script, the audit page filtered to the object."""
    if not is_htmx(request):
        return RedirectResponse(audit_url(object_type, object_id), status_code=303)
    events = audit_log.object_history(session, object_type, object_id, limit=HISTORY_ROWS)
    context = {
        "events": events, "limit": HISTORY_ROWS, "object_type": object_type, "object_id": object_id,
        "audit_url": audit_url(object_type, object_id),
    }
    return render(request, template, context)


@router.get("/tenders/{tender_id:int}/history", dependencies=[ANY_ROLE])
def tender_history(request: Request, tender_id: schemas.PathId, session: SessionDep):
    return _history(request, session, "tender", tender_id, "audit/_history.html")


@router.get("/lots/{lot_id:int}/history", dependencies=[ANY_ROLE])
def lot_history(request: Request, lot_id: schemas.PathId, session: SessionDep):
    return _history(request, session, "lot", lot_id, "audit/_history.html")


@router.get("/offers/{offer_id:int}/history", dependencies=[ANY_ROLE])
def offer_history(request: Request, offer_id: schemas.PathId, session: SessionDep):
    """A table row that opens under the offer's own row."""
    return _history(request, session, "offer", offer_id, "audit/_offer_history_row.html")
