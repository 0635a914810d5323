"""Errors raised by services; each maps to one HTTP status in ``server.app``."""

from __future__ import annotations


class ServiceError(Exception):
    """Base class; ``message`` is safe to show to the user."""

    status_code = 400

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


class NotFound(ServiceError):
    status_code = 404


class Conflict(ServiceError):
    """The edit was made against a stale version, or the object cannot change now."""

    status_code = 409

    def __init__(self, message: str, current: dict | None = None, warnings: list[dict] | None = None) -> None:
        super().__init__(message)
        self.current = current
        self.warnings = warnings


class InvalidField(ServiceError):
    """A value that passed the schema but breaks a rule that needs the database or the domain."""

    status_code = 422

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.detail = message


class ImportRefused(ServiceError):
    """An uploaded file has problems; nothing was stored. ``problems`` name rows and columns."""

    status_code = 422

    def __init__(self, message: str, problems: list[dict]) -> None:
        super().__init__(message)
        self.problems = problems
