"""The in-process writer queue: first come, first served, for threads and event-loop waiters alike, with time-outs
and cancellation that never leave the lock held by nobody. (FIFO hand-off is the classic "ticket lock" discipline,
from memory; the checks below are about order and ownership, not timing.)"""

from __future__ import annotations

import asyncio
import threading
import time
from collections.abc import Callable, Coroutine
from typing import Any, TypeVar

from tracedesk.writer_gate import WriterGate

T = TypeVar("T")


def _run(make: Callable[[], Coroutine[Any, Any, T]]) -> T:
    """Run a coroutine on an event loop of its own thread: the test's thread may already run a loop (Playwright's
    synchronous API does, in the browser tests' worker)."""
    result: list[T] = []
    errors: list[BaseException] = []

    def target() -> None:
        try:
            result.append(asyncio.run(make()))
        except BaseException as error:  # handed back to the test below
            errors.append(error)

    thread = threading.Thread(target=target)
    thread.start()
    thread.join(timeout=30)
    if errors:
        raise errors[0]
    return result[0]


def _wait_until(condition: object, seconds: float = 5.0) -> None:
    deadline = time.monotonic() + seconds
    while not condition():  # type: ignore[operator]
        assert time.monotonic() < deadline, "condition not met"
        time.sleep(0.001)


def test_waiters_get_the_lock_in_the_order_they_asked_threads_and_coroutines_mixed() -> None:
    gate = WriterGate()
    assert gate.acquire(1.0)
    order: list[str] = []
    loop = asyncio.new_event_loop()
    runner = threading.Thread(target=loop.run_forever, daemon=True)
    runner.start()

    async def in_loop(name: str) -> None:
        assert await gate.acquire_async(5.0)
        order.append(name)
        gate.release()

    def in_thread(name: str) -> None:
        assert gate.acquire(5.0)
        order.append(name)
        gate.release()

    started = []
    for index in range(8):
        name = f"w{index}"
        if index % 2:
            started.append(asyncio.run_coroutine_threadsafe(in_loop(name), loop))
        else:
            thread = threading.Thread(target=in_thread, args=(name,))
            thread.start()
        queued = index + 1
        _wait_until(lambda: len(gate._waiters) == queued)  # noqa: B023 - checked before the loop moves on
    gate.release()
    _wait_until(lambda: len(order) == 8)
    assert order == [f"w{index}" for index in range(8)]
    for future in started:
        future.result(timeout=5)
    assert gate.acquire(0.1)  # free again at the end
    loop.call_soon_threadsafe(loop.stop)
    runner.join(timeout=5)
    loop.close()


def test_a_time_out_leaves_the_queue_and_the_next_waiter_still_gets_the_lock() -> None:
    gate = WriterGate()
    assert gate.acquire(1.0)
    assert not gate.acquire(0.05)
    assert len(gate._waiters) == 0

    async def late() -> bool:
        return await gate.acquire_async(0.05)

    assert _run(late) is False
    assert len(gate._waiters) == 0
    gate.release()
    assert gate.acquire(0.1)


def test_a_cancelled_request_never_keeps_a_lock_handed_to_it() -> None:
    gate = WriterGate()
    assert gate.acquire(1.0)

    async def scenario() -> None:
        waiting = asyncio.ensure_future(gate.acquire_async(5.0))
        await asyncio.sleep(0.01)
        gate.release()  # hands the lock to the waiting request ...
        waiting.cancel()  # ... which is cancelled before it runs again
        try:
            got = await waiting  # asyncio.wait_for may deliver the result and swallow the cancellation
        except asyncio.CancelledError:
            got = False
        if got:
            gate.release()
        assert await gate.acquire_async(0.5)  # either way the lock was passed on, not lost
        gate.release()

    _run(scenario)
