"""How the audit trail reads on the pages: object names, links, and before/after as rows.

Pure functions over plain values; the templates get them as globals and filters.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

DASH = "\u2014"

OBJECT_NAMES = {
    "cost_basis": "Cost basis",
    "cost_basis_revision": "Cost basis revision",
    "tender": "Tender",
    "lot": "Lot",
    "offer": "Offer",
    "user": "User",
    "evaluation_record": "Evaluation record",
}
# The objects that have a page of their own.
_OBJECT_PAGES = {
    "tender": "/tenders/{}",
    "lot": "/lots/{}",
    "cost_basis": "/cost-bases/{}",
    "evaluation_record": "/evaluation-records/{}/report",
}
ACTION_NAMES = {
    "create": "created",
    "update": "changed",
    "delete": "deleted",
    "login": "logged in",
    "logout": "logged out",
    "login_failed": "log-in failed",
    "login_locked": "log-in refused (locked)",
    "lockout": "locked out",
    "token_revoked": "token revoked",
    "award": "awarded",
    "reopen": "reopened",
}


def object_name(object_type: str) -> str:
    return OBJECT_NAMES.get(object_type, object_type.replace("_", " ").capitalize())


def action_name(action: str) -> str:
    return ACTION_NAMES.get(action, action.replace("_", " "))


def object_link(object_type: str, object_id: int | None) -> str | None:
    """The page of an object named in the trail, when it has one."""
    pattern = _OBJECT_PAGES.get(object_type)
    return pattern.format(object_id) if pattern and object_id is not None else None


def as_utc(moment: datetime) -> datetime:
    # SQLite hands back naive datetimes; every stored time is UTC.
    return moment.replace(tzinfo=UTC) if moment.tzinfo is None else moment.astimezone(UTC)


def fmt_utc(moment: datetime | None, seconds: bool = False) -> str:
    """A stored time as "2026-03-31 14:05 UTC" (with seconds when asked)."""
    if moment is None:
        return DASH
    return as_utc(moment).strftime("%Y-%m-%d %H:%M:%S UTC" if seconds else "%Y-%m-%d %H:%M UTC")


def iso_utc(moment: datetime) -> str:
    """For a <time datetime="..."> attribute."""
    return as_utc(moment).isoformat()


def shown(value: Any) -> str:
    """A stored value as the trail keeps it: numbers without float noise, nested values as JSON."""
    if value is None:
        return DASH
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.0f}" if value.is_integer() and abs(value) < 1e15 else repr(value)
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True, ensure_ascii=False)
    return str(value)


@dataclass(frozen=True)
class DiffRow:
    field: str
    before: str
    after: str
    changed: bool


def diff_rows(before: dict[str, Any] | None, after: dict[str, Any] | None) -> list[DiffRow]:
    """One row per field named on either side, in the order the event lists them.

    A created object has only after values, a deleted one only before values; the empty
    side shows a dash.
    """
    before, after = before or {}, after or {}
    fields = list(before) + [name for name in after if name not in before]
    return [
        DiffRow(
            field=name,
            before=shown(before[name]) if name in before else DASH,
            after=shown(after[name]) if name in after else DASH,
            changed=name in before and name in after and before[name] != after[name],
        )
        for name in fields
    ]
