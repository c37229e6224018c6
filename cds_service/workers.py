"""Hook calls evaluated off the server's event loop.

Parsing, ingesting and evaluating a call is CPU work that never yields: on the event loop one
large request (100,000 Observations) kept ``/healthz`` from answering for more than 12 s,
long enough to fail a liveness probe. :class:`EvaluationPool` runs that work on
``server.evaluation_threads`` worker threads, each with its own event loop and its own HTTP
client (an ``httpx.AsyncClient`` belongs to the loop it was made on), so a call that fetches
from the client's FHIR server awaits it there. The server's loop only reads bodies, checks
tokens and answers; the interpreter switches threads every few milliseconds, so
``/healthz`` and ``/readyz`` answer while a large call runs.

A call goes to the worker with the fewest large calls, then the fewest calls in flight. At
most ``server.max_large_calls`` large calls (body over ``server.large_call_bytes``) run at
once; :class:`LargeCallGate` refuses the next with 503 and Retry-After, which is kept below
the number of threads so that small calls always find a worker without a large one.

The interpreter's lock is still one: what holds it longest decides how late ``/healthz``
answers. For a large call that is the parse of its body (one C call) and, without care, the
cyclic collector's passes over everything the call parsed (each a second or more at 100,000
Observations). :func:`collector_held` keeps the collector off for the whole of a large call
(the parsed data forms no cycles and is freed by reference counting when the call ends, so
no pass is needed); small calls pause it only while parsing and ingesting, as before.

Context variables (the request id of the log lines) travel with the call: the coroutine is
handed over by ``run_coroutine_threadsafe``, whose callback runs in a copy of the caller's
context.
"""

from __future__ import annotations

import asyncio
import gc
import threading
from collections.abc import Awaitable, Callable, Iterator
from concurrent.futures import Future
from contextlib import contextmanager
from typing import TypeVar

import httpx

T = TypeVar("T")


class _Worker:
    def __init__(self, index: int, make_http: Callable[[], httpx.AsyncClient]) -> None:
        self.loop = asyncio.new_event_loop()
        self.in_flight = 0
        self.large = 0
        self._thread = threading.Thread(
            target=self.loop.run_forever, name=f"tonicity-eval-{index}", daemon=True
        )
        self._thread.start()
        self.http: httpx.AsyncClient = self.submit(_made(make_http)).result()

    def submit(self, coro: Awaitable[T]) -> Future[T]:
        return asyncio.run_coroutine_threadsafe(coro, self.loop)  # type: ignore[arg-type]

    def close(self, timeout: float) -> None:
        try:
            self.submit(self.http.aclose()).result(timeout)
        finally:
            self.loop.call_soon_threadsafe(self.loop.stop)
            self._thread.join(timeout)
            if not self._thread.is_alive():
                self.loop.close()


async def _made(make_http: Callable[[], httpx.AsyncClient]) -> httpx.AsyncClient:
    return make_http()  # on the worker's loop


class EvaluationPool:
    """``threads`` worker threads with an event loop and an HTTP client each."""

    def __init__(self, threads: int, make_http: Callable[[], httpx.AsyncClient]) -> None:
        if threads < 1:
            raise ValueError("an evaluation pool needs at least one thread")
        self._workers = [_Worker(i, make_http) for i in range(threads)]

    @property
    def threads(self) -> int:
        return len(self._workers)

    async def run(
        self, work: Callable[[httpx.AsyncClient], Awaitable[T]], *, large: bool = False
    ) -> T:
        """``await work(http)`` on a worker's loop, with that worker's HTTP client.

        Called from the server's loop. Cancelling the caller (the client went away) cancels
        the work on the worker.
        """
        worker = min(self._workers, key=lambda w: (w.large, w.in_flight))
        worker.in_flight += 1
        worker.large += large
        try:
            return await asyncio.wrap_future(worker.submit(work(worker.http)))
        finally:
            worker.in_flight -= 1
            worker.large -= large

    def close(self, timeout: float = 10.0) -> None:
        """Close every worker's HTTP client and stop its thread (calls in flight end first
        when the server drained them, as uvicorn does on shutdown)."""
        workers, self._workers = self._workers, []
        for worker in workers:
            worker.close(timeout)


_held = 0
_held_lock = threading.Lock()
_was_enabled = False


@contextmanager
def collector_held() -> Iterator[None]:
    """The cyclic collector off until the last holder leaves (holders may overlap, from any
    thread); it is switched back on only if it was on when the first holder came."""
    global _held, _was_enabled
    with _held_lock:
        if _held == 0:
            _was_enabled = gc.isenabled()
            gc.disable()
        _held += 1
    try:
        yield
    finally:
        with _held_lock:
            _held -= 1
            if _held == 0 and _was_enabled:
                gc.enable()


class LargeCallGate:
    """At most ``limit`` large calls at once; used on the server's loop only (no lock)."""

    def __init__(self, limit: int) -> None:
        if limit < 1:
            raise ValueError("the large-call limit must be at least 1")
        self.limit = limit
        self.in_flight = 0

    def try_enter(self) -> bool:
        if self.in_flight >= self.limit:
            return False
        self.in_flight += 1
        return True

    def leave(self) -> None:
        self.in_flight -= 1

    @property
    def full(self) -> bool:
        return self.in_flight >= self.limit
