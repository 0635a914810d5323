"""Errors raised by the domain layer.

The web layer maps these to HTTP status codes in one place; domain code raises
them and never formats responses itself.
"""

from __future__ import annotations

__all__ = ["DomainError", "InvalidInput"]


class DomainError(ValueError):
    """Base class of every error the domain layer raises on purpose."""


class InvalidInput(DomainError):
    """An input value that the method cannot accept.

    Parameters
    ----------
    field : str
        Name of the offending argument, spelt as the keyword of the public
        function (``"discount_rate"``, ``"series"``, ...), so that callers can
        attach the message to the matching form field or JSON member.
    message : str
        What is wrong, in plain words.
    """

    def __init__(self, field: str, message: str) -> None:
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")

    def __str__(self) -> str:
        return f"{self.field}: {self.message}"
