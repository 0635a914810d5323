"""One way for a form's service call to be refused: ``server.pages.forms.attempt`` rolls back on every
refusal and returns the messages by field (behaviour of this project, no outside source)."""

from __future__ import annotations

from pydantic import BaseModel

from server.errors import Conflict, InvalidField
from server.pages.forms import Refused, attempt


class _Session:
    def __init__(self) -> None:
        self.rollbacks = 0

    def rollback(self) -> None:
        self.rollbacks += 1


class _Price(BaseModel):
    unit_price: float


def _raise(exc: Exception):
    def action():
        raise exc
    return action


def test_a_success_returns_the_result_and_rolls_nothing_back():
    session = _Session()
    assert attempt(session, lambda: 42) == 42
    assert session.rollbacks == 0


def test_a_schema_refusal_names_the_field_and_rolls_back():
    session = _Session()

    def action():
        return _Price.model_validate({"unit_price": "lots"})

    result = attempt(session, action)
    assert isinstance(result, Refused) and result.status == 422 and "unit_price" in result.errors
    assert session.rollbacks == 1


def test_a_service_refusal_names_its_field_and_rolls_back():
    session = _Session()
    result = attempt(session, _raise(InvalidField("rating_kva", "must be one of the lot's ratings")))
    assert result == Refused({"rating_kva": "must be one of the lot's ratings"}, 422)
    assert session.rollbacks == 1


def test_a_stale_save_keeps_the_stored_values_and_a_frozen_lot_says_why():
    session = _Session()
    stale = attempt(session, _raise(Conflict("changed by someone else", current={"version": 3})))
    assert stale == Refused({}, 409, {"version": 3})
    frozen = attempt(session, _raise(Conflict("the lot is awarded")))
    assert isinstance(frozen, Refused) and frozen.status == 409 and frozen.errors == {"form": "the lot is awarded"}
    assert session.rollbacks == 2



def test_an_add_form_lets_a_conflict_reach_the_error_notice_after_rolling_back():
    session = _Session()
    try:
        attempt(session, _raise(Conflict("the lot is awarded")), conflict_on_form=False)
    except Conflict as exc:
        assert exc.message == "the lot is awarded"
    else:
        raise AssertionError("the conflict was swallowed")
    assert session.rollbacks == 1
