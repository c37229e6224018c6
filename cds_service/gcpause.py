"""Pause Python's cyclic garbage collector for one short, synchronous, allocation-heavy step.

Parsing a hook request and reading its Observations allocate hundreds of thousands of objects
that stay alive until the call ends. The collector's generation thresholds count those
allocations, and each full pass walks every live object not frozen at start-up: everything
parsed so far, and the data of calls still in flight. Measured with the whole app in process,
paused and not paused alternating (2026-12-02): 5,000 Observations with three calls in flight,
139 -> 125 ms of CPU per call; the parse alone, with three parsed requests alive, 101 -> 20 ms;
200 Observations, 11.7 -> 11.3 ms per call with four in flight.

Pausing defers collection, it frees nothing later than refcounting would: parsed JSON (dicts,
lists, strings, numbers) cannot form a reference cycle, and the few cycles a step may create
(a caught exception's traceback) are found by the next collection after it. A step that runs
with the collector already disabled (by a caller who wants it so) leaves it disabled.
"""

from __future__ import annotations

import gc
from collections.abc import Iterator
from contextlib import contextmanager


@contextmanager
def collector_paused() -> Iterator[None]:
    if not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        gc.enable()
