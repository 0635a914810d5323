"""The load shape forms: typical days as a compact grid (form boxes <-> ``DailyShapeCreate``),
and the problems of a refused metered-year file as rows a person can act on."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from pydantic import ValidationError

from server.pages.forms import plain_message
from server.pages.shape_charts import HOUR_LABELS, MONTH_NAMES
from server.tabular import rows_text

SEASONS = 2
DAY_TYPES = ("weekday", "weekend")
MONTH_CHOICES = [(str(m), MONTH_NAMES[m - 1]) for m in range(1, 13)]

# Invented typical days of a mixed residential feeder, in pu of the winter evening peak:
# a starting point to overwrite, not data about any real network.
_DEFAULTS = [
    ("Winter", [1, 2, 3, 10, 11, 12],
     [0.46, 0.42, 0.40, 0.39, 0.40, 0.46, 0.60, 0.74, 0.70, 0.63, 0.60, 0.61,
      0.62, 0.60, 0.60, 0.66, 0.79, 0.94, 1.00, 0.96, 0.88, 0.76, 0.63, 0.53],
     [0.50, 0.46, 0.43, 0.41, 0.41, 0.44, 0.51, 0.61, 0.71, 0.75, 0.76, 0.75,
      0.74, 0.72, 0.70, 0.73, 0.83, 0.94, 0.97, 0.93, 0.86, 0.76, 0.64, 0.55]),
    ("Summer", [4, 5, 6, 7, 8, 9],
     [0.31, 0.28, 0.27, 0.26, 0.27, 0.31, 0.40, 0.48, 0.46, 0.43, 0.43, 0.45,
      0.47, 0.46, 0.46, 0.49, 0.55, 0.62, 0.66, 0.66, 0.62, 0.55, 0.45, 0.36],
     [0.34, 0.31, 0.29, 0.28, 0.28, 0.30, 0.35, 0.43, 0.50, 0.54, 0.55, 0.55,
      0.54, 0.52, 0.50, 0.52, 0.57, 0.62, 0.64, 0.63, 0.60, 0.54, 0.46, 0.38]),
]


def cell(season: int, day_type: str, hour: int) -> str:
    """The form name of one hourly box, e.g. ``s0_weekday_7``."""
    return f"s{season}_{day_type}_{hour}"


def daily_defaults() -> dict[str, Any]:
    """The typical-days form as first shown: two seasons filled with an editable example."""
    form: dict[str, Any] = {"name": "", "year": "2026"}
    for s, (name, months, weekday, weekend) in enumerate(_DEFAULTS):
        form[f"s{s}_name"] = name
        form[f"s{s}_months"] = [str(m) for m in months]
        for day_type, values in (("weekday", weekday), ("weekend", weekend)):
            for hour, value in enumerate(values):
                form[cell(s, day_type, hour)] = f"{value:g}"
    return form


def daily_typed(lists: dict[str, list[str]]) -> dict[str, Any]:
    """The posted form as typed: one text per box, a list for each season's month boxes."""
    typed: dict[str, Any] = {key: values[0] if values else "" for key, values in lists.items()}
    for s in range(SEASONS):
        typed[f"s{s}_months"] = [m for m in lists.get(f"s{s}_months", []) if m]
    return typed


def kept_seasons(typed: dict[str, Any]) -> list[int]:
    """The seasons sent on: those with a month ticked (all of them when none is, so that the
    missing months are named)."""
    ticked = [s for s in range(SEASONS) if typed.get(f"s{s}_months")]
    return ticked or list(range(SEASONS))


def daily_data(typed: dict[str, Any]) -> tuple[dict[str, Any], list[int]]:
    """``DailyShapeCreate`` input from the typed form, and which form season each entry is."""
    kept = kept_seasons(typed)
    seasons = [
        {
            "name": typed.get(f"s{s}_name", ""),
            "months": typed.get(f"s{s}_months", []),
            **{d: [typed.get(cell(s, d, h), "") for h in range(24)] for d in DAY_TYPES},
        }
        for s in kept
    ]
    data = {"kind": "daily", "name": typed.get("name", ""), "year": typed.get("year", ""), "seasons": seasons}
    return data, kept


def _season_box(kept: list[int], index: int, part: str, hour: int | None = None) -> str:
    season = kept[index] if 0 <= index < len(kept) else index
    if part in DAY_TYPES and hour is not None:
        return cell(season, part, hour)
    return f"s{season}_{part}"


def daily_errors(exc: ValidationError, kept: list[int]) -> dict[str, str]:
    """The first message for each box of the typical-days form."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = tuple(error.get("loc", ()))
        if len(loc) >= 3 and loc[0] == "seasons" and isinstance(loc[1], int):
            part = str(loc[2])
            hour = loc[3] if part in DAY_TYPES and len(loc) > 3 and isinstance(loc[3], int) else None
            box = _season_box(kept, loc[1], part, hour)
        else:
            box = str(loc[0]) if loc else "form"
        errors.setdefault(box, plain_message(error))
    return errors


_DOMAIN_FIELD = re.compile(r"seasons\[(\d+)\]\.(\w+)")


def daily_service_error(field: str, kept: list[int]) -> str:
    """The box a service refusal names: ``seasons[1].months`` is the second kept season's months."""
    found = _DOMAIN_FIELD.fullmatch(field)
    if found:
        return _season_box(kept, int(found.group(1)), found.group(2))
    return "seasons" if field in ("seasons", "values") else field


@dataclass(frozen=True)
class CellProblem:
    box: str
    where: str
    message: str


def cell_problems(errors: dict[str, str], typed: dict[str, Any]) -> list[CellProblem]:
    """Messages of the hourly boxes, which are too small to carry one beside them, in grid order."""
    problems = []
    for s in range(SEASONS):
        season = typed.get(f"s{s}_name") or f"Season {s + 1}"
        for day_type in DAY_TYPES:
            for hour in range(24):
                box = cell(s, day_type, hour)
                if box in errors:
                    problems.append(CellProblem(box, f"{season}, {day_type}, {HOUR_LABELS[hour]}", errors[box]))
    return problems


@dataclass(frozen=True)
class ProblemRow:
    rows: str
    column: str
    message: str


def problem_rows(problems: list[dict[str, Any]]) -> list[ProblemRow]:
    """An import refusal's problems with the row numbers in a column of their own."""
    shown = []
    for problem in problems:
        rows = problem.get("rows") or []
        message = str(problem.get("message", ""))
        where = rows_text(rows) if rows else "\u2014"
        # The service appends every row in brackets ("... and 40 more"); they get their own column here.
        if rows and message.endswith(")") and " (row" in message:
            cut = message.rindex(" (row")
            message, where = message[:cut], message[cut + 2 : -1]
        shown.append(ProblemRow(where, problem.get("column") or "\u2014", message))
    return shown
