"""Form posts to schema input, and validation errors to plain words beside each field."""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from types import UnionType
from typing import Annotated, Any, Literal, TypeVar, Union, get_args, get_origin

from fastapi import Depends, Request
from pydantic import BaseModel, ValidationError
from pydantic_core import PydanticUndefined
from sqlalchemy.orm import Session

from server.errors import Conflict, InvalidField
from server.pages.templating import fmt_plain

FormValues = dict[str, str]
FieldErrors = dict[str, str]


# A password is taken exactly as typed; every other box loses stray spaces at its ends.
_AS_TYPED = {"password"}


async def read_form(request: Request) -> FormValues:
    """The posted fields as text (files are not accepted by any form here)."""
    form = await request.form()
    return {
        key: value if key in _AS_TYPED else value.strip()
        for key, value in form.items()
        if isinstance(value, str)
    }


FormDep = Annotated[FormValues, Depends(read_form)]


async def read_lists(request: Request) -> dict[str, list[str]]:
    """Every posted field with all of its values, for a group of checkboxes sharing a name."""
    form = await request.form()
    lists: dict[str, list[str]] = {}
    for key, value in form.multi_items():
        if isinstance(value, str):
            lists.setdefault(key, []).append(value.strip())
    return lists


FormListsDep = Annotated[dict[str, list[str]], Depends(read_lists)]


def _is_required(model: type[BaseModel], name: str) -> bool:
    return model.model_fields[name].is_required()


def _default(model: type[BaseModel], name: str) -> Any:
    default = model.model_fields[name].default
    return None if default is PydanticUndefined else default


def _whole_number_choices(model: type[BaseModel], name: str) -> bool:
    """Whether a field is a choice of whole numbers (phases: 1 or 3), which a schema will
    not match against the text a form posts."""
    annotation = model.model_fields[name].annotation
    options = get_args(annotation) if get_origin(annotation) in (Union, UnionType) else (annotation,)
    return any(
        get_origin(option) is Literal and all(isinstance(v, int) for v in get_args(option)) for option in options
    )


def _typed(model: type[BaseModel], name: str, value: str) -> Any:
    if _whole_number_choices(model, name) and value.lstrip("-").isdigit():
        return int(value)
    return value


def create_data(form: FormValues, model: type[BaseModel], prefix: str = "") -> dict[str, Any]:
    """Fields of ``model`` found in the form, for a new record.

    An empty box for a required field stays "" so that the schema names it; an empty
    optional box is left out so that the schema's default applies.
    """
    data: dict[str, Any] = {}
    for name in model.model_fields:
        if prefix + name not in form:
            continue
        value = form[prefix + name]
        if value == "" and not _is_required(model, name):
            continue
        data[name] = _typed(model, name, value)
    return data


def patch_data(form: FormValues, create_model: type[BaseModel], names: list[str]) -> dict[str, Any]:
    """Fields for a patch where every box of the edit form is sent.

    An empty box clears an optional field (or restores its default); an empty required
    field stays "" so that the schema refuses it.
    """
    data: dict[str, Any] = {}
    for name in names:
        if name not in form:
            continue
        value = form[name]
        if value == "":
            data[name] = "" if _is_required(create_model, name) else _default(create_model, name)
        else:
            data[name] = _typed(create_model, name, value)
    return data


def _takes_list(model: type[BaseModel], name: str) -> bool:
    """Whether a field is a list (of numbers, here), which a form types as text."""
    annotation = model.model_fields[name].annotation
    options = get_args(annotation) if get_origin(annotation) in (Union, UnionType) else (annotation,)
    for option in options:
        while get_origin(option) is Annotated:
            option = get_args(option)[0]
        if get_origin(option) is list:
            return True
    return False


def number_list(text: str) -> list[str]:
    """A box of numbers, one per line or separated by commas, semicolons or spaces."""
    return [part for part in re.split(r"[\s,;]+", text) if part]


def full_inputs(form: FormValues, model: type[BaseModel]) -> dict[str, Any]:
    """All of a cost basis method's inputs; an empty optional box takes its default, and a
    list box (an energy price path) becomes its numbers."""
    data: dict[str, Any] = {}
    for name in model.model_fields:
        value = form.get(name, "")
        if isinstance(value, str) and _takes_list(model, name):
            value = number_list(value) or ""
        if value == "" and not _is_required(model, name):
            value = _default(model, name)
        data[name] = value
    return data


def _limit(value: Any) -> str:
    return fmt_plain(value) if isinstance(value, int | float) else str(value)


def plain_message(error: dict[str, Any]) -> str:
    """One pydantic error in the words a person filling a form would use."""
    kind = error.get("type", "")
    ctx = error.get("ctx") or {}
    given = error.get("input")
    if kind == "missing" or (given == "" and kind in {"string_too_short", "float_parsing", "int_parsing"}):
        return "fill this in"
    if kind in {"float_parsing", "float_type"}:
        return "must be a number"
    if kind in {"int_parsing", "int_type", "int_from_float"}:
        return "must be a whole number"
    if kind == "finite_number":
        return "must be a finite number"
    if kind == "greater_than_equal":
        return f"must be {_limit(ctx.get('ge'))} or more"
    if kind == "greater_than":
        return f"must be more than {_limit(ctx.get('gt'))}"
    if kind == "less_than_equal":
        return f"must be {_limit(ctx.get('le'))} or less"
    if kind == "less_than":
        return f"must be less than {_limit(ctx.get('lt'))}"
    if kind == "string_too_short":
        return f"must have at least {ctx.get('min_length')} characters"
    if kind == "too_short":
        return "choose at least one" if ctx.get("min_length") == 1 else f"choose at least {ctx.get('min_length')}"
    if kind in {"date_parsing", "date_from_datetime_parsing", "date_from_datetime_inexact", "date_type"}:
        return "must be a date such as 2026-03-31"
    if kind == "string_too_long":
        return f"must be at most {ctx.get('max_length')} characters"
    if kind == "string_pattern_mismatch":
        return "is not in the expected form"
    if kind == "literal_error":
        return f"must be one of {ctx.get('expected')}"
    if kind == "extra_forbidden":
        return "is not a field of this form"
    if kind == "value_error" and ctx.get("error") is not None:
        return str(ctx["error"]).rstrip(".")  # our own validator's words, without pydantic's "Value error, "
    return str(error.get("msg", "is not valid")).rstrip(".")


def _field_of(loc: tuple[Any, ...]) -> str:
    """The form box an error belongs to; a tender's first lot posts its fields unprefixed."""
    parts = [p for p in loc if isinstance(p, str)]
    if len(parts) >= 2 and parts[0] == "lots":
        return parts[1]
    if parts and parts[0] in {"cost_basis_id", "cost_basis_revision"}:
        return "cost_basis"
    return parts[-1] if parts else "form"


def field_errors(exc: ValidationError) -> FieldErrors:
    """The first message for each field, keyed by the field's form name."""
    errors: FieldErrors = {}
    for error in exc.errors(include_url=False):
        errors.setdefault(_field_of(tuple(error.get("loc", ()))), plain_message(error))
    if "currency" in errors and errors["currency"] == "is not in the expected form":
        errors["currency"] = "must be a three-letter code such as EUR"
    return errors


def basis_choice(value: str) -> dict[str, Any]:
    """A cost basis select value "<id>:<revision>" as the two schema fields."""
    basis_id, _, revision = value.partition(":")
    data: dict[str, Any] = {"cost_basis_id": basis_id or ""}
    if revision:
        data["cost_basis_revision"] = revision
    return data


T = TypeVar("T")


@dataclass(frozen=True)
class Refused:
    """Why a form's service call changed nothing: messages by field, the HTTP status, and for a stale
    save the stored values (``Conflict.current``)."""

    errors: FieldErrors
    status: int
    conflict: Any = None


def conflict_errors(exc: Conflict) -> dict[str, str]:
    """A stale save shows the stored values; any other refusal (an awarded lot) says why."""
    return {} if exc.current is not None else {"form": exc.message}


def attempt(session: Session, action: Callable[[], T], *, conflict_on_form: bool = True) -> T | Refused:
    """Run a form's one service call; a refusal rolls the session back and comes back as ``Refused``.

    Every form post goes through here, so no route rolls back by hand and each refusal reads the
    same way: the schema's messages beside their fields (422), a service's ``InvalidField`` beside
    its field (422), a stale version or a frozen lot (409, with the stored values when there are
    some). The session is rolled back in every case, so the page that follows reads the stored data.
    A form that only adds (``conflict_on_form=False``) lets a ``Conflict`` go on, after the rollback,
    to the error notice: there is no stored version to show beside its boxes.
    """
    try:
        return action()
    except ValidationError as exc:
        refused = Refused(field_errors(exc), 422)
    except InvalidField as exc:
        refused = Refused({exc.field: exc.detail}, 422)
    except Conflict as exc:
        if not conflict_on_form:
            session.rollback()
            raise
        refused = Refused(conflict_errors(exc), 409, exc.current)
    session.rollback()
    return refused
