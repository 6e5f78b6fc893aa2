"""Render timed MIDI events through the engine into samples, whole or block by block."""

from __future__ import annotations

import sys
from collections import Counter
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field

import numpy as np

from rtvoice.engine import Engine, Placement, Settings, active_voices, take_placements

DEFAULT_TAIL_CAP_S = 30.0
DEFAULT_RENDER_BLOCK = 2048  # frames per block offline: nobody waits for a file, so fewer, larger blocks
PROGRESS_ABOVE_S = 5.0  # a render longer than this shows a progress bar on a terminal


@dataclass
class PlayReport:
    """What a render played: where each note sounded (string and fret; string 0 under the open rule)
    and how many note-ons no string could play."""

    placements: list[Placement] = field(default_factory=list)
    unplayable: int = 0

    def summary(self) -> list[tuple[Placement, int]]:
        """Each distinct (note, string, fret) with how often it started, in order of first use."""
        counts = Counter((p.note, p.string, p.fret) for p in self.placements)
        first: dict[tuple[int, int, int], Placement] = {}
        for p in self.placements:
            first.setdefault((p.note, p.string, p.fret), p)
        return [(p, counts[key]) for key, p in first.items()]


def note_events(note: int, velocity: int, seconds: float, channel: int = 0) -> list[tuple[float, int, int, int]]:
    """A held key: note-on at 0, note-off after ``seconds``."""
    return [(0.0, 0x90 | channel, note, velocity), (float(seconds), 0x80 | channel, note, 0)]


def longest_frames(events: Sequence[tuple[float, int, int, int]], sample_rate_hz: int, block_frames: int,
                   tail_cap_s: float) -> int:
    """An upper bound on the frames :func:`iter_blocks` yields (last event, tail cap, one block)."""
    last_s = max((t for t, *_ in events), default=0.0)
    return round(last_s * sample_rate_hz) + int(tail_cap_s * sample_rate_hz) + 2 * block_frames


def iter_blocks(
    events: Sequence[tuple[float, int, int, int]],
    settings: Settings,
    sample_rate_hz: int = 48000,
    block_frames: int = 256,
    tail_cap_s: float = DEFAULT_TAIL_CAP_S,
    progress: Callable[[float], None] | None = None,
    report: PlayReport | None = None,
) -> Iterator[np.ndarray]:
    """Blocks of ``events`` (time_s, status, data1, data2) played through a new engine.

    ``report``, when given, collects where each note sounded and how many could not be played.

    Each event lands on its own sample: the engine's fixed output delay (its limiter's
    look-ahead) is taken off the front and rendered on at the end, so a file does not
    start late the way a live stream must. After the last event the tail rings until
    every voice has retired (below -100 dBFS) or ``tail_cap_s`` has passed. Each
    yielded block is a view of the engine's buffer, valid until the next one (the first
    and last may be shorter than a block): memory stays one block however long the piece is.
    """
    engine = Engine(settings, sample_rate_hz, block_frames)
    skip = flush = int(engine.stats.latency_frames)
    fs, n = engine.fs, engine.block
    ordered = sorted(events, key=lambda e: e[0])
    stamps = np.array([round(t * fs) for t, *_ in ordered], dtype=np.int64)
    last = int(stamps[-1]) if len(stamps) else 0
    cap_end = last + int(tail_cap_s * fs)
    i, start, count = 0, 0, 0
    total_guess = max(last + int(2 * fs), 1)
    while True:
        end = start + n
        batch = []
        while i < len(ordered) and stamps[i] < end:
            _, status, d1, d2 = ordered[i]
            batch.append((int(stamps[i] - start), status, d1, d2))
            i += 1
        out = engine.render(batch)
        if report is not None and batch:
            report.placements += take_placements(engine)
            report.unplayable = engine.stats.unplayable
        if skip:
            taken = min(skip, out.size)
            skip -= taken
            out = out[taken:]
        if out.size:
            yield out
        start = end
        count += 1
        if progress and count % 200 == 0:
            progress(min(start / total_guess, 0.99))
        if i >= len(ordered) and (active_voices(engine) == 0 or start >= cap_end):
            break
    while flush > 0:  # what the delay still holds
        out = engine.render([])[:flush]
        flush -= out.size
        yield out
    if progress:
        progress(1.0)


def render_events(
    events: Sequence[tuple[float, int, int, int]],
    settings: Settings,
    sample_rate_hz: int = 48000,
    block_frames: int = 256,
    tail_cap_s: float = DEFAULT_TAIL_CAP_S,
    progress: Callable[[float], None] | None = None,
) -> np.ndarray:
    """Samples of ``events`` played through a new engine, as one array (see :func:`iter_blocks`)."""
    blocks = [b.copy() for b in iter_blocks(events, settings, sample_rate_hz, block_frames, tail_cap_s, progress)]
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
