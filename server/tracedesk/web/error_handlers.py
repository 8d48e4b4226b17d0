"""Turn refusals into clear answers: JSON under /api, a page (or a login redirect) elsewhere."""

from __future__ import annotations

from urllib.parse import quote

from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse, RedirectResponse, Response
from starlette.exceptions import HTTPException as StarletteHTTPException

from tracedesk.errors import AppError, NotAuthenticated
from tracedesk.science.errors import ScienceInputError
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


async def handle_http_error(request: Request, error: Exception) -> Response:
    assert isinstance(error, StarletteHTTPException)
    if _wants_page(request):
        return _page_error(request, error.status_code, str(error.detail))
    return JSONResponse({"detail": error.detail}, status_code=error.status_code, headers=error.headers)


def install_error_handlers(app: FastAPI) -> None:
    app.add_exception_handler(AppError, handle_app_error)
    app.add_exception_handler(ScienceInputError, handle_science_error)
    app.add_exception_handler(StarletteHTTPException, handle_http_error)
