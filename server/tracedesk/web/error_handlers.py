"""Turn refusals into clear answers: JSON under /api, a page (or a login redirect) elsewhere."""

from __future__ import annotations

from typing import Any
from urllib.parse import quote

from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse, RedirectResponse, Response
from sqlalchemy.exc import DataError, DBAPIError
from sqlalchemy.orm.exc import StaleDataError
from starlette.exceptions import HTTPException as StarletteHTTPException

from tracedesk.db import is_retryable
from tracedesk.errors import AppError, Conflict, NotAuthenticated, PreconditionFailed, Unprocessable
from tracedesk.science.errors import ScienceInputError
from tracedesk.storage import StorageError
from tracedesk.web.templating import render


def _wants_page(request: Request) -> bool:
    return not request.url.path.startswith("/api/") and "text/html" in request.headers.get("accept", "")


def _page_error(request: Request, status: int, message: str) -> Response:
    if status == 401:
        target = quote(request.url.path + (f"?{request.url.query}" if request.url.query else ""))
        return RedirectResponse(f"/login?next={target}", status_code=303)
    return render(request, "error.html", None, {"status": status, "message": message}, status_code=status)


async def handle_app_error(request: Request, error: Exception) -> Response:
    assert isinstance(error, AppError)
    if _wants_page(request):
        return _page_error(request, error.status_code, error.message)
    body: dict[str, object] = {"detail": error.message, "code": error.code}
    if error.detail is not None:
        body["context"] = error.detail
    headers = {"WWW-Authenticate": "Bearer"} if isinstance(error, NotAuthenticated) else None
    return JSONResponse(body, status_code=error.status_code, headers=headers)


async def handle_science_error(request: Request, error: Exception) -> Response:
    return await handle_app_error(request, AppError.with_status(422, str(error), code="invalid"))


async def handle_stale_write(request: Request, error: Exception) -> Response:
    """Another request changed the record between this one's read and its write (``version_id_col``)."""
    message = "someone else changed this record at the same moment; reload it and apply your change again"
    refusal = PreconditionFailed(message) if request.headers.get("if-match") else Conflict(message)
    return await handle_app_error(request, refusal)


async def handle_storage_error(request: Request, error: Exception) -> Response:
    """Storage failures carry their own status (404 missing, 507 disk full, 500 corrupt) and a clear message."""
    assert isinstance(error, StorageError)
    return await handle_app_error(request, AppError.with_status(error.http_status, str(error), code=error.code))


async def handle_out_of_range(request: Request, error: Exception) -> Response:
    """A number beyond what the database stores (an id of 2**70) or, on PostgreSQL, a text longer than its
    column: the request is wrong, not the server (the transaction was rolled back)."""
    message = "a value in the request is out of range for the archive (a number too large or a text too long)"
    return await handle_app_error(request, Unprocessable(message))


async def handle_database_error(request: Request, error: Exception) -> Response:
    """A serialization failure, deadlock or lock time-out that outlived the retries: nothing was stored, and the
    client may simply send the request again. Anything else is a server fault and propagates (500, logged)."""
    assert isinstance(error, DBAPIError)
    if not is_retryable(error):
        raise error
    busy = AppError.with_status(
        503, "the archive is busy with other changes; nothing was saved, try again", code="busy"
    )
    answer = await handle_app_error(request, busy)
    answer.headers["Retry-After"] = "1"
    return answer


async def handle_http_error(request: Request, error: Exception) -> Response:
    assert isinstance(error, StarletteHTTPException)
    if _wants_page(request):
        return _page_error(request, error.status_code, str(error.detail))
    return JSONResponse({"detail": error.detail}, status_code=error.status_code, headers=error.headers)


def install_error_handlers(app: FastAPI) -> None:
    app.add_exception_handler(AppError, handle_app_error)
    app.add_exception_handler(ScienceInputError, handle_science_error)
    app.add_exception_handler(StaleDataError, handle_stale_write)
    app.add_exception_handler(StorageError, handle_storage_error)
    app.add_exception_handler(OverflowError, handle_out_of_range)
    app.add_exception_handler(DataError, handle_out_of_range)
    app.add_exception_handler(DBAPIError, handle_database_error)
    document_error_shape(app)


def document_error_shape(app: FastAPI) -> None:
    """Say in the OpenAPI schema what a 422 really looks like: FastAPI's validation errors list their problems
    (``detail`` is an array), our own refusals name one (``detail`` is a sentence, with ``code`` and maybe
    ``context``); the documented shape must cover both, or clients that trust the schema break."""
    generate = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            schema = generate()
            validation = schema.get("components", {}).get("schemas", {}).get("HTTPValidationError")
            if validation is not None:
                listed = validation["properties"]["detail"]
                validation["properties"]["detail"] = {"anyOf": [listed, {"type": "string"}], "title": "Detail"}
                validation["properties"]["code"] = {"type": "string", "title": "Code"}
                validation["properties"]["context"] = {"title": "Context"}
        return app.openapi_schema or generate()

    app.openapi = openapi  # type: ignore[method-assign]
    app.add_exception_handler(StarletteHTTPException, handle_http_error)
