"""Seeded random MIDI for soak runs: notes, pedals, bends, mapped controllers, bursts.

Everything is drawn from one :class:`numpy.random.Generator`, so a seed replays the
same run. Traffic never touches :data:`HELD_CHANNEL`: that channel carries the one
sustained note whose phase and level the soak checks (see :mod:`rtvoice.soak.held`).
Burst notes are soft (velocity <= :data:`BURST_MAX_VELOCITY`). The engine counts voices
started in the current block as loudest, so a burst of more note-ons than voices steals every
older voice, the held note too; the soak then plucks it again (a new segment).
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass

import numpy as np

from rtvoice.engine import midi

HELD_CHANNEL = 15  # MIDI channel 16
TRAFFIC_CHANNELS = 15  # channels 0..14
BURST_MAX_VELOCITY = 16  # (16/127)^2: -36 dB below a full-velocity note
#: Controllers of the default controller map (rtvoice.engine.controls) that move live
#: parameters or the next note's sound: pickup position (1/33), gain (7/39), resonance (74),
#: Q (71), release (72), pluck position and width (16, 17), pickup width (18).
MAPPED_CCS = (1, 33, 7, 39, 74, 71, 72, 16, 17, 18)


@dataclass(frozen=True)
class TrafficRates:
    """Mean event rates in events per second of audio (Poisson), and sizes."""

    notes_per_s: float = 8.0
    mean_note_s: float = 0.4
    pedal_per_s: float = 0.4
    bend_per_s: float = 6.0
    bend_range_per_s: float = 0.05
    cc_per_s: float = 20.0
    pressure_per_s: float = 2.0
    channel_reset_per_s: float = 0.03  # CC120 / CC121 / CC123 on a random traffic channel
    burst_every_s: float = 15.0
    burst_extra_notes: int = 8  # a burst has 2 x voices + this many note-ons


class RandomTraffic:
    """Per-block event lists of random MIDI on the traffic channels."""

    def __init__(self, rng: np.random.Generator, sample_rate_hz: float, block_frames: int,
                 rates: TrafficRates | None = None):
        self.rng = rng
        self.block = block_frames
        self.block_s = block_frames / sample_rate_hz
        self.rates = rates or TrafficRates()
        self.pending_offs: list[tuple[int, int, int, int]] = []  # (block, offset, channel, note)
        self.bursts = 0
        self.note_ons = 0

    def _count(self, per_s: float) -> int:
        return int(self.rng.poisson(per_s * self.block_s))

    def _offset(self) -> int:
        return int(self.rng.integers(0, self.block))

    def _note_off_later(self, now: int, channel: int, note: int, mean_s: float) -> None:
        blocks = 1 + int(self.rng.exponential(mean_s) / self.block_s)
        heapq.heappush(self.pending_offs, (now + blocks, self._offset(), channel, note))

    def events(self, block_index: int, voices: int) -> list[tuple[int, int, int, int]]:
        """Events for block ``block_index`` (time-ordered); ``voices`` sizes the bursts."""
        rng, r, out = self.rng, self.rates, []
        ch = lambda: int(rng.integers(0, TRAFFIC_CHANNELS))  # noqa: E731
        while self.pending_offs and self.pending_offs[0][0] <= block_index:
            _, off, c, note = heapq.heappop(self.pending_offs)
            out.append((off, midi.NOTE_OFF | c, note, int(rng.integers(0, 128))))
        for _ in range(self._count(r.notes_per_s)):
            c, note = ch(), int(rng.integers(21, 109))
            out.append((self._offset(), midi.NOTE_ON | c, note, int(rng.integers(1, 128))))
            self._note_off_later(block_index, c, note, r.mean_note_s)
            self.note_ons += 1
        for _ in range(self._count(r.pedal_per_s)):
            out.append((self._offset(), midi.CONTROL_CHANGE | ch(), midi.CC_SUSTAIN, 127 * int(rng.integers(0, 2))))
        for _ in range(self._count(r.bend_per_s)):
            out.append((self._offset(), midi.PITCH_BEND | ch(), int(rng.integers(0, 128)), int(rng.integers(0, 128))))
        for _ in range(self._count(r.bend_range_per_s)):  # RPN 0: pitch bend range, then RPN null
            c, off = ch(), self._offset()
            for cc, v in ((101, 0), (100, 0), (6, int(rng.integers(0, 25))), (38, int(rng.integers(0, 100))),
                          (101, 127), (100, 127)):
                out.append((off, midi.CONTROL_CHANGE | c, cc, v))
        for _ in range(self._count(r.cc_per_s)):
            cc = int(MAPPED_CCS[rng.integers(0, len(MAPPED_CCS))])
            out.append((self._offset(), midi.CONTROL_CHANGE | ch(), cc, int(rng.integers(0, 128))))
        for _ in range(self._count(r.pressure_per_s)):
            out.append((self._offset(), midi.CHANNEL_PRESSURE | ch(), int(rng.integers(0, 128)), 0))
        for _ in range(self._count(r.channel_reset_per_s)):
            cc = (midi.CC_ALL_SOUND_OFF, midi.CC_RESET_CONTROLLERS, midi.CC_ALL_NOTES_OFF)[int(rng.integers(0, 3))]
            out.append((self._offset(), midi.CONTROL_CHANGE | ch(), cc, 0))
        if rng.random() < self.block_s / r.burst_every_s:
            out += self._burst(block_index, voices)
        out.sort(key=lambda e: e[0])
        return out

    def _burst(self, block_index: int, voices: int) -> list[tuple[int, int, int, int]]:
        """More soft note-ons in one block than there are voices: stealing must make room."""
        rng, out = self.rng, []
        self.bursts += 1
        for _ in range(2 * voices + self.rates.burst_extra_notes):
            c, note = int(rng.integers(0, TRAFFIC_CHANNELS)), int(rng.integers(21, 109))
            out.append((self._offset(), midi.NOTE_ON | c, note, int(rng.integers(1, BURST_MAX_VELOCITY + 1))))
            self._note_off_later(block_index, c, note, 0.2)
            self.note_ons += 1
        return out
