"""Render timed MIDI events through the engine into a buffer of samples."""

from __future__ import annotations

import sys
from collections.abc import Callable, Sequence

import numpy as np

from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings

DEFAULT_TAIL_CAP_S = 30.0


def note_events(note: int, velocity: int, seconds: float, channel: int = 0) -> list[tuple[float, int, int, int]]:
    """A held key: note-on at 0, note-off after ``seconds``."""
    return [(0.0, 0x90 | channel, note, velocity), (float(seconds), 0x80 | channel, note, 0)]


def render_events(
    events: Sequence[tuple[float, int, int, int]],
    settings: Settings,
    sample_rate_hz: int = 48000,
    block_frames: int = 256,
    tail_cap_s: float = DEFAULT_TAIL_CAP_S,
    progress: Callable[[float], None] | None = None,
) -> np.ndarray:
    """Samples of ``events`` (time_s, status, data1, data2) played through a new engine.

    Each event lands on its own sample. After the last event the tail rings until
    every voice has retired (below -100 dBFS) or ``tail_cap_s`` has passed.
    """
    engine = Engine(settings, sample_rate_hz, block_frames)
    fs, n = engine.fs, engine.block
    ordered = sorted(events, key=lambda e: e[0])
    stamps = np.array([round(t * fs) for t, *_ in ordered], dtype=np.int64)
    last = int(stamps[-1]) if len(stamps) else 0
    cap_end = last + int(tail_cap_s * fs)
    blocks: list[np.ndarray] = []
    i, start = 0, 0
    total_guess = max(last + int(2 * fs), 1)
    while True:
        end = start + n
        batch = []
        while i < len(ordered) and stamps[i] < end:
            _, status, d1, d2 = ordered[i]
            batch.append((int(stamps[i] - start), status, d1, d2))
            i += 1
        blocks.append(engine.render(batch).copy())
        start = end
        if progress and len(blocks) % 200 == 0:
            progress(min(start / total_guess, 0.99))
        if i >= len(ordered) and (engine.pool.n_active == 0 or start >= cap_end):
            break
    if progress:
        progress(1.0)
    return np.concatenate(blocks) if blocks else np.zeros(0)


def text_progress(label: str) -> Callable[[float], None]:
    """A one-line progress bar on stderr."""

    def show(fraction: float) -> None:
        filled = int(30 * fraction)
        sys.stderr.write(f"\r{label} [{'#' * filled}{'.' * (30 - filled)}] {100 * fraction:5.1f}%")
        if fraction >= 1.0:
            sys.stderr.write("\n")
        sys.stderr.flush()

    return show
