"""Keep the UI out of the audio's way: the UI thread runs at a lower CPU priority.

On a machine with few cores (and an audio server without real-time scheduling) the
engine process competes with the UI for CPU time; a niced UI yields to it. Linux sets
niceness per thread and a new thread or process inherits it from the thread that
creates it, so engine restarts go through a helper thread made *before* the UI thread
is niced: a restarted engine gets the normal priority, not the UI's.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor

UI_NICE = 10


def normal_priority_spawner() -> ThreadPoolExecutor:
    """A one-thread executor whose thread keeps the priority the process started with."""
    spawner = ThreadPoolExecutor(max_workers=1, thread_name_prefix="rtvoice-spawn")
    spawner.submit(lambda: None).result()  # the thread exists now, before any nicing
    return spawner


def lower_ui_thread_priority(step: int = UI_NICE) -> int | None:
    """Raise this thread's niceness by ``step``; returns the new value, or None where not possible."""
    if not hasattr(os, "setpriority"):
        return None
    tid = threading.get_native_id()
    try:
        now = os.getpriority(os.PRIO_PROCESS, tid)
        os.setpriority(os.PRIO_PROCESS, tid, min(19, now + step))
        return os.getpriority(os.PRIO_PROCESS, tid)
    except OSError:
        return None
