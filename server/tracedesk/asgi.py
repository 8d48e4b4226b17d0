"""ASGI entry point for uvicorn workers: ``uvicorn tracedesk.asgi:app`` (settings from the environment)."""

from tracedesk.app import create_app

app = create_app()
