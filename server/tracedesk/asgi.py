"""ASGI entry point for uvicorn workers: ``uvicorn tracedesk.asgi:app`` (settings from the environment).

``tracedesk serve`` and the docker-compose web service both run this; each worker process sends its logs to
standard error as JSON lines with the request id (``tracedesk.logs``).
"""

from tracedesk.app import create_app
from tracedesk.config import Settings
from tracedesk.logs import configure_logging

settings = Settings()
configure_logging(settings.log_level)
app = create_app(settings)
