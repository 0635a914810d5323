"""Read-only queries the intake pages need beyond the shared services: a filtered slice of an
import's preview, a tender's recent uploads, and who last reviewed each built-in limit table."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from server import schemas
from server.services.common import may_see_all
from server.services.offer_imports import get_import, import_out
from server.storage import audit
from server.storage.models import LimitTableReview, OfferImport


@dataclass(frozen=True)
class PreviewSlice:
    """An import's counts with the rows a page shows: the matching rows, at most ``limit``."""

    staged: schemas.OfferImportOut
    matching: int  # rows that pass the filter, before the limit


def import_preview(session: Session, import_id: int, problems_only: bool, limit: int) -> PreviewSlice:
    """The import's counts over every row, and its rows (or only those with errors or warnings)
    up to ``limit``, so that a file of thousands of rows stays readable."""
    staged = import_out(get_import(session, import_id))
    rows = [r for r in staged.rows if r.errors or r.warnings] if problems_only else staged.rows
    return PreviewSlice(staged.model_copy(update={"rows": rows[:limit]}), len(rows))


def recent_imports(session: Session, tender_id: int, limit: int = 5) -> list[schemas.OfferImportOut]:
    """A tender's latest uploads the viewer may open (their own; every one for an administrator),
    newest first, counts only."""
    query = select(OfferImport).where(OfferImport.tender_id == tender_id)
    if not may_see_all(session):
        query = query.where(OfferImport.created_by == audit.get_actor(session).username)
    found = session.scalars(query.order_by(OfferImport.id.desc()).limit(limit))
    return [import_out(staged, rows_limit=0) for staged in found]


def committed_import(session: Session, tender_id: int, import_id: int) -> schemas.OfferImportOut | None:
    """One of the tender's imports, counts only, if it was committed; None otherwise."""
    staged = session.get(OfferImport, import_id)
    if staged is None or staged.tender_id != tender_id or staged.committed_at is None:
        return None
    return import_out(staged, rows_limit=0)


@dataclass(frozen=True)
class ReviewOut:
    status: str
    note: str
    reviewed_by: str
    reviewed_at: datetime


def latest_reviews(session: Session) -> dict[str, ReviewOut]:
    """The latest review of each reviewed built-in table, by key."""
    latest: dict[str, ReviewOut] = {}
    for review in session.scalars(select(LimitTableReview).order_by(LimitTableReview.id)):
        latest[review.key] = ReviewOut(review.status, review.note, review.reviewed_by, review.reviewed_at)
    return latest
