"""Errors of the domain, each knowing its HTTP status (no FastAPI import here)."""

from __future__ import annotations

from typing import Any


class ServiceError(Exception):
    """Base of every expected failure; the front doors render it with `status_code`."""

    status_code = 400
    code = "bad_request"

    def __init__(self, message: str, *, detail: Any = None) -> None:
        super().__init__(message)
        self.message = message
        self.detail = detail


class NotFound(ServiceError):
    status_code = 404
    code = "not_found"


class NotAuthenticated(ServiceError):
    status_code = 401
    code = "not_authenticated"


class PermissionDenied(ServiceError):
    status_code = 403
    code = "forbidden"


class Conflict(ServiceError):
    status_code = 409
    code = "conflict"


class InvalidTransition(Conflict):
    code = "invalid_transition"


class StaleVersion(Conflict):
    """The record changed since the caller read it; `detail` carries both versions."""

    code = "stale_version"


class InvalidInput(ServiceError):
    """A field was refused; `detail` is a list of {loc, msg, type} like FastAPI's 422."""

    status_code = 422
    code = "invalid_input"


class TooManyAttempts(ServiceError):
    status_code = 429
    code = "too_many_attempts"


class Unavailable(ServiceError):
    """The service cannot answer just now (the database is unreachable); `detail` may carry
    retry_after_seconds."""

    status_code = 503
    code = "unavailable"


class DatabaseNotMigrated(RuntimeError):
    """Raised at start-up when the database is behind the code's migrations."""
