"""Keep the garbage collector's pauses out of the audio: freeze the heap the engine process starts with.

Python's cyclic collector walks every object it tracks in a full collection, holding the
interpreter lock the audio callback needs the whole time. In the engine process, once
it has started, that is about 70 000 objects (modules, classes, functions, the engine
and its tables' owners), and a full collection of them took 20-27 ms on the 2-CPU
test machine: up to ten 128-frame periods of silence, whenever enough new objects
had survived to set one off. Those objects live as long as the process, so they are
moved out of the collector's reach once, at start-up (:func:`gc.freeze`); later
collections walk only what was made since, and garbage made since is still collected.
"""

from __future__ import annotations

import gc


def freeze_startup_heap() -> int:
    """Collect once, then move every surviving object to the collector's permanent generation.

    Call once in the engine process, after the engine is built and before the audio stream
    starts (the collection itself takes as long as any full one). Returns the number of
    objects frozen.
    """
    gc.collect()
    gc.freeze()
    return gc.get_freeze_count()


def full_collection_objects() -> int:
    """How many objects a full collection would walk now (the frozen ones are not among them)."""
    return len(gc.get_objects())
