"""ASGI entry point for uvicorn workers: ``uvicorn tracedesk.asgi:app`` (settings from the environment).

``tracedesk serve`` and the docker-compose web service both run this; each worker process sends its logs to
standard error as JSON lines with the request id (``tracedesk.logs``).
"""

import gc

from tracedesk.app import create_app
from tracedesk.config import Settings
from tracedesk.imaging.decoder_launch import prewarm
from tracedesk.logs import configure_logging

settings = Settings()
configure_logging(settings.log_level)
app = create_app(settings)
# Everything loaded so far (modules, the app, SQLAlchemy's caches) lives as long as the process: moving it out of
# the collector's reach keeps full collections short. Without this, a busy worker stalled every few seconds for
# 100-200 ms while the collector walked those objects (bench/bench_load.py; Python docs, ``gc.freeze``).
gc.collect()
gc.freeze()
prewarm()  # a decoder child ready before the first upload (it would otherwise wait for the child's imports)
