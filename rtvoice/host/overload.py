"""A budget for note-ons per block, so a flood of them cannot stall the audio callback.

Starting a voice (and stealing one) is the engine's costly event: a few tenths of a
millisecond on a slow machine (a chord costs less per note, the engine starts its
voices together), so at thousands of note-ons a second the callback would overrun
its period, the audio server would drop the client and the MIDI queue would
overflow, losing the very all-notes-off that should end it. The guard learns what
one note-on costs here (the render time of blocks with note-ons, less that of blocks
without, per note-on, as an envelope that rises fast and falls slowly) and keeps a
token bucket: each block adds as many note-ons as fit in a share of its period, up
to a burst of :data:`BURST`, and no block takes more note-ons than fit in
:data:`BLOCK_SHARE` of its period beside its other work (a burst of note-ons in one
block overran the period on this machine: the first block of every big strum was a
dropout). A note-on without a token, or beyond that, waits for the next block,
and so does every event after the last note-on the block takes (order is kept, so
no note-off overtakes its note-on, and a re-pluck's note-off meets its note-on in
one block, where the engine changes the old voice's tables once, not twice): a big
chord is spread over a few blocks (a few milliseconds) and nothing is lost. Only
when more than :data:`MAX_DEFERRED` events wait, or the oldest has
waited :data:`MAX_WAIT_S` (a flood), are the waiting note-ons dropped and counted,
and the other events (note-offs, controllers, pedal: cheap) play at once, so a
panic still works during a flood and is never more than that late.
"""

from __future__ import annotations

import math

from rtvoice.engine import NOTE_ON

BUDGET_SHARE = 0.12  # over time, note-ons may take this share of the callback's period
#: Note-ons the bucket holds: a strum of 32 voices (the host target's scene) passes whole after a
#: moment's quiet, spread over the blocks it needs (with 8, its last notes waited past MAX_WAIT_S
#: and were dropped).
BURST = 32
#: No block's note-ons and other work may be expected to take more of its period than this. Blocks
#: with note-ons are 1-5 % of the blocks of a strummed scene, so they set the callback's 99th
#: percentile: this keeps them under the host's target for it (35 %), with room for the machine.
BLOCK_SHARE = 0.3
MAX_DEFERRED = 64  # events that may wait for a later block before waiting note-ons are dropped
#: Nor may any event wait longer than this (so a panic behind them is not late). A strum of 32
#: at one note-on per block (a slow machine: about a millisecond each) takes 85 ms at 128 frames.
MAX_WAIT_S = 0.1
INITIAL_COST_S = 4e-4  # a cautious first guess of one note-on's cost, until measured
RISE_RATE, FALL_RATE = 0.3, 0.02  # the cost estimate follows rises fast and falls slowly (an upper envelope)
BASE_RATE = 0.05  # weight of each new block in the running mean of blocks without note-ons


def _offset(event: tuple) -> int:
    return event[0]


class NoteOnGuard:
    """Holds back the note-ons of a block beyond what the measured cost allows (callback side)."""

    def __init__(self, period_s: float, budget_share: float = BUDGET_SHARE, burst: int = BURST,
                 max_deferred: int = MAX_DEFERRED, block_share: float = BLOCK_SHARE):
        self.period_s = period_s
        self.budget_s = budget_share * period_s
        self.block_s = block_share * period_s
        self.burst = burst
        self.max_deferred = max_deferred
        self.tokens = float(burst)
        self.cost_s = INITIAL_COST_S  # one note-on, over a block without any
        self.base_s = 0.0  # a block without note-ons
        self.dropped = 0
        self.deferred = 0  # events that waited for a later block, all told
        self._waiting: list = []  # events for the start of the next block, in order
        self._waited = 0  # blocks the oldest waiting event has waited
        self._max_wait_blocks = max(1, math.ceil(MAX_WAIT_S / period_s))
        self._note_ons = 0

    @property
    def allowed(self) -> int:
        """Note-ons the next block may take: the tokens it has, at most what fits in its share (at least one)."""
        fits = max(1, math.floor((self.block_s - self.base_s) / self.cost_s))
        return min(math.floor(self.tokens), fits)

    @property
    def waiting(self) -> int:
        """Events held back for the next block."""
        return len(self._waiting)

    def admit(self, events: list) -> int:
        """Fit ``events`` (sample offset, status, data1, data2; in time order) to the budget, in place.

        Events held back from earlier blocks come first, at offset 0. From the first
        note-on without a token on, events wait for the next block; returns how many
        note-ons were dropped (only when too many wait, or too long).
        """
        self.tokens = min(self.burst, self.tokens + self.budget_s / self.cost_s)
        if self._waiting:
            events[:0] = self._waiting
            self._waiting = []
            self._waited += 1
        else:
            self._waited = 0
        allowed = self.allowed
        count = 0
        cut = None
        after_last = 0  # just after the last note-on this block takes
        for i, (_, status, _, velocity) in enumerate(events):
            if status & 0xF0 == NOTE_ON and velocity:
                if count == allowed:
                    cut = i
                    break
                count += 1
                after_last = i + 1
        self._note_ons = count
        self.tokens -= count
        if cut is None:
            return 0
        if count:
            # What comes between the last note-on taken and the first held back waits with the latter:
            # a re-pluck's note-off then meets its note-on in one block, where the engine makes the
            # old voice's release and fade one change of tables rather than two in two blocks.
            cut = after_last
        rest = events[cut:]
        del events[cut:]
        if len(rest) <= self.max_deferred and self._waited < self._max_wait_blocks:
            self._waiting = [(0, status, d1, d2) for _, status, d1, d2 in rest]
            self.deferred += len(rest)
            return 0
        # A flood: the waiting note-ons go; everything else plays now, in order.
        dropped = 0
        for event in rest:
            if event[1] & 0xF0 == NOTE_ON and event[3]:
                dropped += 1
            else:
                events.append(event)
        events.sort(key=_offset)  # held-back events sit at offset 0 (sort is stable: order kept)
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
