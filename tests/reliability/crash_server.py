"""A server launcher for the SIGKILL test: imports Tracedesk once, then forks one uvicorn server per command.

Importing and building the app (numpy, scipy, libvips, PDFium, migrations checked) takes seconds; forking a
process that already holds it takes milliseconds, so the test can kill and restart the server many times. The
launcher stays single-threaded and holds no database connection when it forks (OPENBLAS_NUM_THREADS=1 is set by
the test; the engine's pool is emptied), so each server starts from a clean state, as after a reboot.

Commands on standard input, one per line; answers on standard output:
``start PORT`` -> ``pid N`` (the server process, to be SIGKILLed by the test); ``wait N`` -> ``exited S``;
``quit``. The server reads its settings from the environment (TRACEDESK_DATA_DIR, TRACEDESK_DATABASE_URL).
"""

from __future__ import annotations

import os
import sys

import uvicorn
from fastapi import FastAPI

from tracedesk.app import create_app
from tracedesk.config import Settings
from tracedesk.imaging import decoder_launch


def _serve(app: FastAPI, port: int) -> None:
    decoder_launch.prewarm()  # this server's own spare decoder process (a forked one cannot use the launcher's)
    config = uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning", access_log=False)
    uvicorn.Server(config).run()


def main() -> None:
    app = create_app(Settings())
    uvicorn.Config(app, host="127.0.0.1", port=0, log_level="warning").load()  # import the protocol modules now
    for route in app.routes:  # FastAPI resolves each included route on first use: do it once, here
        list(getattr(route, "effective_route_contexts", list)())
    app.state.tracedesk.engine.dispose()  # no connection may be shared with the forked servers
    for line in sys.stdin:
        command, _, argument = line.strip().partition(" ")
        if command == "start":
            pid = os.fork()
            if pid == 0:
                try:
                    os.close(0)  # the launcher's commands are not the server's
                    _serve(app, int(argument))
                finally:
                    os._exit(0)
            print(f"pid {pid}", flush=True)
        elif command == "wait":
            _, status = os.waitpid(int(argument), 0)
            print(f"exited {status}", flush=True)
        elif command == "quit":
            return


if __name__ == "__main__":
    main()
