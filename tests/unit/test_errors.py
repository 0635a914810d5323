"""Domain error types."""

import pytest

from domain import DomainError, InvalidInput


def test_invalid_input_carries_field_and_message():
    error = InvalidInput("discount_rate", "must be > -1, got -2")
    assert error.field == "discount_rate"
    assert error.message == "must be > -1, got -2"
    assert str(error) == "discount_rate: must be > -1, got -2"


def test_invalid_input_is_a_domain_error_and_a_value_error():
    with pytest.raises(DomainError):
        raise InvalidInput("years", "must be >= 1")
    assert issubclass(InvalidInput, ValueError)
