"""The application factory: ``create_app(settings) -> FastAPI``. Nothing is built at import time."""

from __future__ import annotations

from fastapi import FastAPI
from fastapi.responses import FileResponse, JSONResponse, Response
from fastapi.staticfiles import StaticFiles
from sqlalchemy import text

from tracedesk import __version__
from tracedesk.accounts import api as accounts_api
from tracedesk.accounts import pages as accounts_pages
from tracedesk.accounts.passwords import build_hasher
from tracedesk.archive import api as archive_api
from tracedesk.archive import pages as archive_pages
from tracedesk.archive.ingest import decode_limits
from tracedesk.audit import api as audit_api
from tracedesk.audit import pages as audit_pages
from tracedesk.config import Settings
from tracedesk.db import build_engine, session_factory, writer_engine
from tracedesk.digitizing import api as digitizing_api
from tracedesk.digitizing import batch_pages, chart_spec_pages, workbench_api
from tracedesk.digitizing import pages as digitizing_pages
from tracedesk.digitizing.sheet_image import use_decode_limits
from tracedesk.exports import api as exports_api
from tracedesk.exports import pages as exports_pages
from tracedesk.jobs import api as jobs_api
from tracedesk.jobs.dispatch import build_dispatcher
from tracedesk.migrate import readiness_problems, upgrade_database
from tracedesk.storage import build_store
from tracedesk.web.error_handlers import install_error_handlers
from tracedesk.web.request_log import RequestLogMiddleware
from tracedesk.web.state import AppState
from tracedesk.web.templating import build_templates, web_root
from tracedesk.workflow import api as workflow_api
from tracedesk.workflow import pages as workflow_pages

API_DESCRIPTION = (
    "Tracedesk turns archived paper chart records into trustworthy numbers. Authenticate with a browser session "
    "(POST /api/v1/session, then send X-CSRF-Token on changes) or an API token ('Authorization: Bearer ...'). "
    "Editable records carry a version and an ETag; changes need If-Match (428 without, 412 when stale)."
)


def build_state(settings: Settings, *, migrate: bool = True) -> AppState:
    """Engine, session factories, hasher, file store and templates for one app (or one CLI run)."""
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    engine = build_engine(settings.resolved_database_url)
    if migrate and engine.dialect.name == "sqlite":
        upgrade_database(engine)  # the embedded default migrates itself; PostgreSQL uses `tracedesk migrate`
    state = AppState(
        settings=settings,
        engine=engine,
        reader=session_factory(engine),
        writer=session_factory(writer_engine(engine), exclusive=engine.dialect.name == "sqlite"),
        hasher=build_hasher(memory_kib=settings.argon2_memory_kib, time_cost=settings.argon2_time_cost),
        store=build_store(settings),
        templates=build_templates(),
    )
    state.dispatcher = build_dispatcher(state)
    use_decode_limits(decode_limits(settings))
    return state


def create_app(settings: Settings | None = None, *, state: AppState | None = None) -> FastAPI:
    settings = settings or Settings()
    app = FastAPI(
        title="Tracedesk",
        version=__version__,
        description=API_DESCRIPTION,
        openapi_url="/api/v1/openapi.json",
        docs_url="/docs",
        redoc_url=None,
    )
    app.state.tracedesk = state or build_state(settings)
    install_error_handlers(app)
    app.add_middleware(RequestLogMiddleware)
    app.mount("/static", StaticFiles(directory=str(web_root() / "static")), name="static")
    for router in (
        accounts_api.router,
        archive_api.router,
        audit_api.router,
        digitizing_api.router,
        workbench_api.router,
        jobs_api.router,
        workflow_api.router,
        exports_api.router,
        accounts_pages.router,
        archive_pages.router,
        audit_pages.router,
        digitizing_pages.router,
        batch_pages.router,
        chart_spec_pages.router,
        workflow_pages.router,
        exports_pages.router,
    ):
        app.include_router(router)
    _add_service_routes(app)
    return app


def _add_service_routes(app: FastAPI) -> None:
    @app.get("/api/v1/health", tags=["service"])
    def health() -> dict[str, str]:
        """Liveness and readiness: the process answers and the database accepts a query."""
        state: AppState = app.state.tracedesk
        with state.engine.connect() as connection:
            connection.execute(text("SELECT 1"))
        return {"status": "ok", "version": __version__, "database": state.engine.dialect.name}

    @app.get("/api/v1/ready", tags=["service"], responses={503: {}})
    def ready() -> Response:
        """Readiness: the schema is at the newest migration and the file store accepts a write."""
        state: AppState = app.state.tracedesk
        problems = readiness_problems(state)
        body = {"status": "ready" if not problems else "not ready", "problems": problems}
        return JSONResponse(body, status_code=200 if not problems else 503)

    @app.get("/favicon.ico", include_in_schema=False)
    def favicon() -> Response:
        return FileResponse(web_root() / "static" / "favicon.svg", media_type="image/svg+xml")
