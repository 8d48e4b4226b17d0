"""Exceptions that carry their HTTP status; services raise them, the app turns them into JSON or pages."""

from __future__ import annotations

from typing import Any


class AppError(Exception):
    """A refusal with a clear message for the user."""

    status_code = 400
    code = "bad_request"

    def __init__(self, message: str, *, detail: Any = None) -> None:
        super().__init__(message)
        self.message = message
        self.detail = detail

    @staticmethod
    def with_status(status_code: int, message: str, *, code: str) -> AppError:
        """An error of the given status for messages that come from a lower layer (e.g. the science core)."""
        error = AppError(message)
        error.status_code = status_code
        error.code = code
        return error


class NotAuthenticated(AppError):
    status_code = 401
    code = "not_authenticated"


class Forbidden(AppError):
    status_code = 403
    code = "forbidden"


class NotFound(AppError):
    status_code = 404
    code = "not_found"


class Conflict(AppError):
    status_code = 409
    code = "conflict"


class PreconditionFailed(AppError):
    status_code = 412
    code = "stale_version"


class PayloadTooLarge(AppError):
    status_code = 413
    code = "too_large"


class UnsupportedMediaType(AppError):
    status_code = 415
    code = "unsupported_media_type"


class Unprocessable(AppError):
    status_code = 422
    code = "invalid"


class PreconditionRequired(AppError):
    status_code = 428
    code = "if_match_required"


class TooManyRequests(AppError):
    status_code = 429
    code = "too_many_requests"
