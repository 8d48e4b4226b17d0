"""Starting decoder processes without making an upload wait for Python to import numpy, libvips and PDFium.

A decoder process spends about 0.2 s (idle machine) to 0.8 s (busy one) importing its libraries before it can
read a byte. Each web process therefore keeps one spare: started, importing or waiting, never used. A session
takes the spare and starts the next one in its place (`start_decoder`), so the import overlaps whatever the web
process does meanwhile. Every session still gets a fresh process: nothing a hostile file did to one decoder's
memory or libraries is there for the next upload.

A process forked from a web process (a pre-forking server) does not use its parent's spare, which it cannot
wait for; it starts its own. At exit the spare is told to stop (end of its input) and waited for.
"""

from __future__ import annotations

import atexit
import os
import subprocess
import sys
import threading
import weakref
from collections.abc import Sequence
from dataclasses import dataclass, field

DECODER_COMMAND = (sys.executable, "-m", "tracedesk.imaging.decoder_child")
CLOSE_SECONDS = 5.0
# One thread for linear algebra and few malloc arenas: each would reserve address space the memory limit counts.
_CHILD_ENVIRONMENT = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MALLOC_ARENA_MAX": "2"}


@dataclass
class _Spares:
    process: subprocess.Popen[bytes] | None = None
    lock: threading.Lock = field(default_factory=threading.Lock)
    #: Spares of the process this one was forked from: not ours to use or wait for, kept so they are never
    #: garbage-collected (and warned about) here.
    inherited: list[subprocess.Popen[bytes]] = field(default_factory=list)


_SPARES = _Spares()
_INHERITED_PEAKS: weakref.WeakKeyDictionary[subprocess.Popen[bytes], int] = weakref.WeakKeyDictionary()


def own_peak_rss_bytes(pid: int) -> int:
    """A living process's own peak resident set (VmHWM, bytes), 0 once it has exited or on other systems.

    Unlike `wait4`'s ru_maxrss, VmHWM belongs to the process's current memory map, which exec replaces.
    """
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError):
        pass
    return 0


def inherited_peak_bytes(process: subprocess.Popen[bytes]) -> int:
    """What `wait4` will count for `process` before it did anything itself: the spawning process's peak
    resident set when it was started (Linux carries the high-water mark across fork and exec)."""
    return _INHERITED_PEAKS.get(process, 0)


def _popen(command: Sequence[str]) -> subprocess.Popen[bytes]:
    process = subprocess.Popen(  # noqa: S603 - our own interpreter and module, no shell, no user input
        list(command), stdin=subprocess.PIPE, stdout=subprocess.PIPE, env={**os.environ, **_CHILD_ENVIRONMENT}
    )
    _INHERITED_PEAKS[process] = own_peak_rss_bytes(os.getpid())
    return process


def start_decoder(command: Sequence[str] = DECODER_COMMAND) -> subprocess.Popen[bytes]:
    """A decoder process nobody has used, with pipes to its standard input and output (the spare when there is
    one for `command`), leaving a new spare in its place. Other commands (tests) are started directly."""
    if tuple(command) != DECODER_COMMAND:
        return _popen(command)
    with _SPARES.lock:
        spare, _SPARES.process = _SPARES.process, _popen(command)
    if spare is not None and spare.poll() is None:
        return spare
    if spare is not None:
        retire(spare)  # it died waiting (killed from outside): reap it
    return _popen(command)


def prewarm() -> None:
    """Start the spare now if there is none, so that the first upload does not wait for imports either (a server
    may call this when it starts)."""
    with _SPARES.lock:
        if _SPARES.process is None:
            _SPARES.process = _popen(DECODER_COMMAND)


def retire(process: subprocess.Popen[bytes]) -> None:
    """Close the pipes to a decoder process and wait for it to exit; kill it if it does not soon."""
    for stream in (process.stdin, process.stdout):
        if stream is not None:
            stream.close()
    try:
        process.wait(timeout=CLOSE_SECONDS)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def _forget_parents_spare() -> None:
    _SPARES.lock = threading.Lock()  # another thread of the parent may have held it at the fork
    if _SPARES.process is not None:
        for stream in (_SPARES.process.stdin, _SPARES.process.stdout):
            if stream is not None:
                stream.close()  # our copies only: the parent's spare must still see its input end with the parent
        _SPARES.inherited.append(_SPARES.process)
        _SPARES.process = None


def _retire_spare() -> None:
    with _SPARES.lock:
        spare, _SPARES.process = _SPARES.process, None
    if spare is not None:
        retire(spare)


os.register_at_fork(after_in_child=_forget_parents_spare)
atexit.register(_retire_spare)
