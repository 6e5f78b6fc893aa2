"""A budget for note-ons per block, so a flood of them cannot stall the audio callback.

Starting a voice (and stealing one) is the engine's costly event: a few tenths of a
millisecond each on a slow machine, so at thousands of note-ons a second the callback
would overrun its period, the audio server would drop the client and the MIDI
queue would overflow, losing the very all-notes-off that should end it. The guard
learns what one note-on costs here (the render time of blocks with note-ons, less
that of blocks without, per note-on, as an envelope that rises fast and falls slowly)
and keeps a token bucket: each block adds as many note-ons as fit in a share of its
period, up to a burst of :data:`BURST` (a chord struck with both hands passes whole
after a moment's quiet); note-ons without a token are dropped and counted. Every other
event (note-offs, controllers, pedal) is cheap and always passes, so a panic still
works during a flood.
"""

from __future__ import annotations

import math

from rtvoice.engine.midi import NOTE_ON

BUDGET_SHARE = 0.12  # over time, note-ons may take this share of the callback's period
BURST = 8  # note-ons the bucket holds: a two-handed chord
INITIAL_COST_S = 4e-4  # a cautious first guess of one note-on's cost, until measured
RISE_RATE, FALL_RATE = 0.3, 0.02  # the cost estimate follows rises fast and falls slowly (an upper envelope)
BASE_RATE = 0.05  # weight of each new block in the running mean of blocks without note-ons


class NoteOnGuard:
    """Drops the note-ons of a block beyond what the measured cost allows (callback side)."""

    def __init__(self, period_s: float, budget_share: float = BUDGET_SHARE, burst: int = BURST):
        self.period_s = period_s
        self.budget_s = budget_share * period_s
        self.burst = burst
        self.tokens = float(burst)
        self.cost_s = INITIAL_COST_S  # one note-on, over a block without any
        self.base_s = 0.0  # a block without note-ons
        self.dropped = 0
        self._note_ons = 0

    @property
    def allowed(self) -> int:
        """Note-ons the next block may take."""
        return math.floor(self.tokens)

    def admit(self, events: list) -> int:
        """Remove from ``events`` (sample offset, status, data1, data2) the note-ons over the
        budget, keeping the first ones and every other event in order; returns how many went."""
        self.tokens = min(self.burst, self.tokens + self.budget_s / self.cost_s)
        count = 0
        for _, status, _, velocity in events:
            if status & 0xF0 == NOTE_ON and velocity:
                count += 1
        allowed = self.allowed
        self._note_ons = min(count, allowed)
        self.tokens -= self._note_ons
        if count <= allowed:
            return 0
        kept = []
        seen = 0
        for event in events:
            if event[1] & 0xF0 == NOTE_ON and event[3]:
                seen += 1
                if seen > allowed:
                    continue
            kept.append(event)
        events[:] = kept
        dropped = count - allowed
        self.dropped += dropped
        return dropped

    def learn(self, render_s: float) -> None:
        """Take the render time of the block whose events :meth:`admit` just saw."""
        n = self._note_ons
        if n == 0:
            self.base_s += BASE_RATE * (render_s - self.base_s)
            return
        per = max(render_s - self.base_s, 0.0) / n
        rate = RISE_RATE if per > self.cost_s else FALL_RATE
        self.cost_s = max(self.cost_s + rate * (per - self.cost_s), 1e-6)
