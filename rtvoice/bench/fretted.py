"""The fretted instrument under load: a tremolo across the six strings of the default sound.

The open-string grid (:mod:`rtvoice.bench.grid`) times chords of up to 128 voices; a fretted
instrument sounds at most one note per string, but each note starts at a place of its own (a
string, a fret: its stiffness, loss, pluck and pickup fractions), and a new note on a sounding
string fades the old one. So its cost is in the blocks where notes start. The scene: the default
six-string with every feature on (two pickups with apertures, one velocity- and one
displacement-sensing, the coil resonance, the first pickup swinging so its ramp runs), a new note
every ``NOTE_EVERY_BLOCKS`` blocks, string after string, climbing the neck fret by fret. Blocks
where a note starts and the others are timed apart.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from rtvoice.bench.scenes import FEATURES, SAMPLE_RATE_HZ, SWING_EVERY_BLOCKS, SWING_POSITIONS
from rtvoice.bench.timing import Timing, summarize
from rtvoice.engine import Engine, Settings, active_voices

NOTE_ON = 0x90
#: A note every this many blocks (at 128 frames and 48 kHz, one every 8 ms: a fast tremolo).
NOTE_EVERY_BLOCKS = 3
#: The frets the tremolo climbs through, one step after each round of the six strings.
FRETS = (0, 3, 5, 7, 9, 12, 14, 17)


def fretted_settings(modes: int = 128, base: Settings | None = None) -> Settings:
    """The default six-string with every feature on, notes sent by channel (channel n: string n)."""
    base = base or Settings.defaults()
    features = {**FEATURES, "instrument.assign": "channel", "string.modes": modes}
    return base.with_values(features, "bench")


@dataclass(frozen=True)
class FrettedTiming:
    """Block times of the fretted tremolo: every block, the blocks where a note started, the rest."""

    block: int
    modes: int
    every_block: Timing
    note_on_blocks: Timing
    other_blocks: Timing
    active_mean: float
    unplayable: int

    @property
    def period_us(self) -> float:
        return self.block / SAMPLE_RATE_HZ * 1e6

    def as_dict(self) -> dict:
        period = self.period_us
        return {
            "block": self.block, "modes_per_voice": self.modes, "period_us": round(period, 1),
            "note_every_blocks": NOTE_EVERY_BLOCKS, "active_voices_mean": round(self.active_mean, 2),
            "unplayable": self.unplayable,
            "every_block": self.every_block.as_dict(), "note_on_blocks": self.note_on_blocks.as_dict(),
            "other_blocks": self.other_blocks.as_dict(),
            "load_median": round(self.every_block.median_us / period, 4),
            "load_p99": round(self.every_block.p99_us / period, 4),
            "note_on_load_p99": round(self.note_on_blocks.p99_us / period, 4),
        }


def tremolo_note(i: int, settings: Settings) -> tuple[int, int, int, int]:
    """The note-on of the ``i``-th tremolo note: strings 1..6 in turn, a fret step per round."""
    strings = settings.strings
    string = i % len(strings)
    fret = FRETS[(i // len(strings)) % len(FRETS)]
    return (0, NOTE_ON | string, int(strings[string].note) + fret, 96 - 4 * (i % 3))


def time_fretted(block: int, repeats: int, modes: int = 128, warmup: int = 60) -> FrettedTiming:
    """Time ``repeats`` blocks of the tremolo after ``warmup`` (each string sounding first)."""
    settings = fretted_settings(modes)
    engine = Engine(settings, SAMPLE_RATE_HZ, block)
    engine.render([(0, NOTE_ON | s, int(e.note), 90) for s, e in enumerate(settings.strings)])
    clock = time.perf_counter_ns
    note_on: list[int] = []
    others: list[int] = []
    active: list[int] = []
    notes = 0
    for i in range(warmup + repeats):
        if i % SWING_EVERY_BLOCKS == 0:  # untimed: keeps the first pickup's ramp running
            engine.set_value("pickup.0.position", SWING_POSITIONS[(i // SWING_EVERY_BLOCKS) % 2])
        starts = i % NOTE_EVERY_BLOCKS == 0
        events = [tremolo_note(notes, settings)] if starts else []
        notes += starts
        t0 = clock()
        engine.render(events)
        took = clock() - t0
        if i >= warmup:
            (note_on if starts else others).append(took)
            active.append(active_voices(engine))
    every = note_on + others
    return FrettedTiming(block, modes, summarize(every), summarize(note_on), summarize(others),
                         float(np.mean(active)), int(engine.stats.unplayable))
