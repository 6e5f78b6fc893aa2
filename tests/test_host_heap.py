"""The engine process's frozen start-up heap (rtvoice.host.heap) against the collector's own accounting.

Python Library Reference, gc module (3.7 and later): gc.freeze() moves every tracked
object to a permanent generation that later collections ignore; gc.get_objects() lists
the tracked objects a collection can walk; gc.get_freeze_count() counts the frozen ones.
"""

from __future__ import annotations

import gc
import weakref

import pytest

from rtvoice.engine.settings import Settings
from rtvoice.host import heap
from rtvoice.host.link import EngineLink


@pytest.fixture
def thawed():
    yield
    gc.unfreeze()  # the test process's heap goes back to the collector


class _Node:
    pass


def test_the_start_up_heap_leaves_the_collectors_walk_and_new_garbage_is_still_collected(thawed):
    before = heap.full_collection_objects()
    frozen = heap.freeze_startup_heap()
    assert frozen == gc.get_freeze_count() >= before // 2
    assert heap.full_collection_objects() < before // 10
    # A reference cycle made afterwards is garbage the collector still finds.
    a, b = _Node(), _Node()
    a.other, b.other = b, a
    gone = weakref.ref(a)
    del a, b
    assert gone() is not None  # only the cyclic collector can free a cycle
    assert gc.collect() >= 2
    assert gone() is None


def test_the_engine_process_freezes_its_start_up_heap_and_says_so():
    link = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    try:
        info = link.ready_info
        # numpy, scipy and the engine make tens of thousands of tracked objects; the walk left is small.
        assert info.heap_frozen > 20000
        assert info.heap_walked < info.heap_frozen // 20
    finally:
        link.close()
    assert link.summary["heap_frozen"] == info.heap_frozen
