"""collector_paused: the cyclic collector is off inside the step and as before after it.

Behaviour of gc.disable/gc.enable/gc.isenabled as the Python documentation (module ``gc``)
states it; the test pins down that a pause never leaves the collector off, whatever the step
does, and never turns it on for a caller who turned it off.
"""

from __future__ import annotations

import gc

import pytest

from cds_service.gcpause import collector_paused


@pytest.fixture(autouse=True)
def _restore_collector():
    was = gc.isenabled()
    yield
    (gc.enable if was else gc.disable)()


def test_off_inside_and_on_after() -> None:
    gc.enable()
    with collector_paused():
        assert not gc.isenabled()
    assert gc.isenabled()


def test_on_after_a_step_that_raises() -> None:
    gc.enable()
    with pytest.raises(ValueError), collector_paused():
        raise ValueError("a bad body")
    assert gc.isenabled()


def test_a_caller_who_turned_it_off_keeps_it_off() -> None:
    gc.disable()
    with collector_paused():
        assert not gc.isenabled()
    assert not gc.isenabled()


def test_cycles_made_during_a_pause_are_collected_after_it() -> None:
    import weakref

    class Node:
        pass

    gc.enable()
    with collector_paused():
        a, b = Node(), Node()
        a.other, b.other = b, a  # a reference cycle
        watch = weakref.ref(a)
        del a, b
        assert watch() is not None  # refcounting alone cannot free a cycle
    gc.collect()
    assert watch() is None
