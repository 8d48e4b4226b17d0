"""A first-come, first-served lock for the SQLite writers of one process, for threads and the event loop alike.

SQLite admits one writer at a time. Writers of one web process queue here before ``BEGIN IMMEDIATE``, so they
never spin in SQLite's busy handler (sleep-and-retry). The queue is FIFO and hands the lock straight to the next
waiter when it is released: no polling gap, and no waiter overtaken again and again under load (a polled lock let
a few autosaves wait for most of a second while others went through; see ``bench/bench_load.py``).
Requests wait in the event loop (an asyncio future); jobs and the CLI wait in their thread (an event).
"""

from __future__ import annotations

import asyncio
import threading
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field


@dataclass(eq=False)
class _Waiter:
    wake: Callable[[], object]
    granted: bool = field(default=False)


def _resolve(future: asyncio.Future[None]) -> None:
    if not future.done():
        future.set_result(None)


class WriterGate:
    """FIFO lock with hand-off: ``release`` passes ownership to the longest waiter, if any."""

    def __init__(self) -> None:
        self._mutex = threading.Lock()
        self._held = False
        self._waiters: deque[_Waiter] = deque()

    def _try_enter(self, wake: Callable[[], object]) -> _Waiter | None:
        """Take the free lock (None) or join the queue (the waiter to wait on). Caller holds no mutex."""
        with self._mutex:
            if not self._held and not self._waiters:
                self._held = True
                return None
            waiter = _Waiter(wake)
            self._waiters.append(waiter)
            return waiter

    def _give_up(self, waiter: _Waiter) -> bool:
        """Leave the queue after a time-out or cancellation; True if the lock was handed over meanwhile."""
        with self._mutex:
            if waiter.granted:
                return True
            self._waiters.remove(waiter)
            return False

    def acquire(self, timeout: float) -> bool:
        """Wait in this thread for at most ``timeout`` seconds; True once the lock is ours."""
        event = threading.Event()
        waiter = self._try_enter(event.set)
        if waiter is None or event.wait(timeout):
            return True
        return self._give_up(waiter)

    async def acquire_async(self, timeout: float) -> bool:
        """Wait in the event loop (no thread held) for at most ``timeout`` seconds; True once the lock is ours."""
        loop = asyncio.get_running_loop()
        future: asyncio.Future[None] = loop.create_future()
        waiter = self._try_enter(lambda: loop.call_soon_threadsafe(_resolve, future))
        if waiter is None:
            return True
        try:
            await asyncio.wait_for(future, timeout)
            return True
        except TimeoutError:
            return self._give_up(waiter)
        except BaseException:  # cancelled (the client went away): never leave the lock handed to nobody
            if self._give_up(waiter):
                self.release()
            raise

    def release(self) -> None:
        """Hand the lock to the next waiter, or free it."""
        with self._mutex:
            if self._waiters:
                waiter = self._waiters.popleft()
                waiter.granted = True
                waiter.wake()
                return
            self._held = False
