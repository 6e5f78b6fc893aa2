"""The performer: MIDI semantics and the voice-allocation decisions, in time order.

It reads each channel message of a block on its sample and decides what happens to
the voices: which one a note-on starts (a fresh slot, or one freed by stealing the
quietest when all are busy), which a note-off releases or the pedal holds, which a
re-pluck or all-sound-off fades. On a fretted instrument it also decides where each note
sounds (:class:`~rtvoice.engine.instrument.Instrument`: by the hand's fret or by channel), plays
one note per string as a real string does (a new note on a sounding string fades the old one, as
a re-pluck does) and leaves out a note no string can play, counting it. It owns the channel state
(bend, RPN, sustain, MPE zones) and hands every controller it does not own to the controller router (the
sound's controller map). What it decides goes to the voice renderer as
:class:`~rtvoice.engine.changes.VoiceChange` records; it never touches a mode.
"""

from __future__ import annotations

from collections import deque
from typing import Protocol

import numpy as np

from rtvoice.engine import midi
from rtvoice.engine.changes import ChangeKind, Excitation, NoteStart, VoiceChange
from rtvoice.engine.control_router import ControlRouter
from rtvoice.engine.instrument import Instrument, Placement, string_and_fret, strings_of
from rtvoice.engine.voices import FADING, HELD, RELEASED, SOUNDING, VoicePool


class LevelBounds(Protocol):
    """What the performer needs of the voice renderer to choose a voice to steal."""

    def start_bound(self, velocity: int, place: int, excitation: Excitation | None) -> float: ...


PLACEMENTS_KEPT = 4096


class Performer:
    """Turns the MIDI channel messages of a block into voice changes (``changes``, in time order).

    ``voices``: at most this many notes sound at once (fading ones aside); a note-on beyond
    them steals the quietest. ``block_frames`` and the block counter the engine passes to
    :meth:`begin_block` date the fades (the oldest fade is reused first when every slot is busy).
    """

    def __init__(self, router: ControlRouter, levels: LevelBounds, voices: int, block_frames: int):
        self.channels = midi.ChannelState()
        self.router = router
        self.levels = levels
        self.voices = voices
        self.block = block_frames
        self.changes: list[VoiceChange] = []
        self.bends_changed = False  # a channel's bend moved: ringing voices retune after the block
        self.accepting = True  # False while the pool waits to be rebuilt: note-ons are ignored
        self.stolen = 0
        self.unplayable = 0  # note-ons that no string could play (left out)
        #: Where the latest notes sounded (a render's summary and the UI read them; the oldest drop out).
        self.placements: deque[Placement] = deque(maxlen=PLACEMENTS_KEPT)
        self.instrument: Instrument | None = None  # None: the open rule (set by the engine)
        self._order = 0
        self._block_index = 0
        self._bound_block = -1  # the block in which pool.level was last refreshed for stealing (see _bounds)
        self.pool: VoicePool

    def attach(self, pool: VoicePool, voices: int) -> None:
        """Play the voices of ``pool`` (at most ``voices`` at once): after every (re)build of the pool."""
        self.pool = pool
        self.voices = voices
        self._bound_block = -1

    def begin_block(self, block_index: int) -> None:
        self._block_index = block_index

    def handle(self, at: int, status: int, d1: int, d2: int) -> None:
        """One channel message on sample ``at`` of the block."""
        kind, ch = status & 0xF0, status & 0x0F
        if kind == midi.NOTE_ON and d2 > 0:
            self.note_on(at, ch, d1 & 0x7F, d2 & 0x7F)
        elif kind == midi.NOTE_OFF or kind == midi.NOTE_ON:
            self.note_off(at, ch, d1 & 0x7F)
        elif kind == midi.CONTROL_CHANGE:
            self.control(at, ch, d1 & 0x7F, d2 & 0x7F)
        elif kind == midi.PITCH_BEND:
            self.channels.set_bend(ch, (d1 & 0x7F) | ((d2 & 0x7F) << 7))
            self.bends_changed = True
        elif kind == midi.CHANNEL_PRESSURE:
            self.channels.pressure[ch] = (d1 & 0x7F) / 127.0
            self.router.on_pressure(ch, self.channels.pressure[ch])

    # -- notes --------------------------------------------------------------------
    def note_on(self, at: int, ch: int, note: int, velocity: int) -> None:
        if not self.accepting:
            return
        pool = self.pool
        n = pool.n_active
        state = pool.state[:n]
        again = [v for v in self._slots_of(ch, note) if state[v] != FADING]
        place = note
        if self.instrument is not None:
            placed = self._place(ch, note, again)
            if placed is None:
                self.unplayable += 1
                return
            self.placements.append(placed)
            place = placed.place
            # One note per string: whatever the string was playing stops, as a re-pluck does.
            on_string = (strings_of(pool.place[:n]) == placed.string) & (state != FADING)
            again += [v for v in np.flatnonzero(on_string).tolist() if v not in again]
        # A re-plucked note stops its old vibration with a short fade, as a finger would.
        for v in again:
            self.fade(v, at)
        sounding = np.flatnonzero(state != FADING)
        if sounding.size >= self.voices:
            bound = self._bounds()[sounding]
            quiet = sounding[np.lexsort((pool.order[sounding], bound))[0]]  # quietest, then oldest
            self.fade(int(quiet), at)
            self.stolen += 1
        v = pool.allocate()
        fresh = v >= 0
        if not fresh:  # every slot busy: reuse the voice that has been fading longest (so the quietest)
            fading = pool.state[: pool.n_active] == FADING
            v = int(np.argmin(np.where(fading, pool.fade_since[: pool.n_active], np.iinfo(np.int64).max)))
        pool.state[v] = SOUNDING
        pool.note[v] = note
        pool.place[v] = place
        pool.velocity[v] = velocity
        pool.channel[v] = ch
        self._order += 1
        pool.order[v] = self._order
        excitation = self.router.note_excitation(ch)
        pool.level[v] = self.levels.start_bound(velocity, place, excitation)  # its level is not set up yet
        start = NoteStart(ch, note, velocity, place, excitation, fresh)
        self.changes.append(VoiceChange(v, at, ChangeKind.START, start))

    def _place(self, ch: int, note: int, again: list[int]) -> Placement | None:
        """Where a note-on sounds on the fretted instrument: the string its key already rings on (a
        re-pluck), else the instrument's choice among the strings (MPE member channels by the hand)."""
        assert self.instrument is not None
        pool = self.pool
        for v in again:
            string, fret = string_and_fret(int(pool.place[v]))
            if string:
                return Placement(note, int(pool.place[v]), string, fret)
        n = pool.n_active
        # over arrays: a loop comparing numpy scalars with the state enum costs ~1 us a slot
        sounding = set(strings_of(pool.place[:n][pool.state[:n] != FADING]).tolist())
        return self.instrument.choose(note, ch, sounding, by_hand=self.channels.zone_master(ch) is not None)

    def _bounds(self) -> np.ndarray:
        """Level bounds of the slots for stealing, computed once per block.

        A voice's bound falls by at most one block's decay within the block, so the
        choice of the quietest voice is the same as with fresh bounds but for near ties.
        Voices started in this block have the level their note-on gives them.
        """
        pool = self.pool
        if self._bound_block != self._block_index:
            pool.level[: pool.n_active] = pool.bound()
            for change in self.changes:
                if change.start is not None:
                    start = change.start
                    pool.level[change.slot] = self.levels.start_bound(start.velocity, start.place, start.excitation)
            self._bound_block = self._block_index
        return pool.level

    def note_off(self, at: int, ch: int, note: int) -> None:
        pool = self.pool
        for v in self._slots_of(ch, note):
            if pool.state[v] != SOUNDING:
                continue
            if self.channels.sustain[ch]:
                pool.state[v] = HELD
            else:
                self._release(v, at)

    def _slots_of(self, ch: int, note: int) -> list[int]:
        """Active slots playing ``note`` on channel ``ch``, in any state (one compare over the slots, then a few)."""
        pool = self.pool
        return [v for v in np.flatnonzero(pool.note[: pool.n_active] == note).tolist() if pool.channel[v] == ch]

    def _release(self, v: int, at: int) -> None:
        self.pool.state[v] = RELEASED
        self.changes.append(VoiceChange(v, at, ChangeKind.RELEASE))

    def fade(self, v: int, at: int) -> None:
        """Fade slot v's voice to silence from sample ``at`` (stolen, re-plucked, all sound off)."""
        self.pool.state[v] = FADING
        self.pool.fade_since[v] = self._block_index * self.block + at
        self.changes.append(VoiceChange(v, at, ChangeKind.FADE))

    def fade_all(self, at: int, channel: int | None = None) -> None:
        """Fade every voice not fading yet (on ``channel`` only, when given)."""
        pool = self.pool
        for v in range(pool.n_active):
            if pool.state[v] != FADING and (channel is None or pool.channel[v] == channel):
                self.fade(v, at)

    # -- controllers --------------------------------------------------------------
    def control(self, at: int, ch: int, cc: int, value: int) -> None:
        """A control change: the pedal, channel-mode messages and RPN are the performer's own; every
        other controller goes to the controller map."""
        chan, pool = self.channels, self.pool
        if cc == midi.CC_SUSTAIN:
            down = value >= 64
            chan.sustain[ch] = down
            if not down:
                for v in range(pool.n_active):
                    if pool.channel[v] == ch and pool.state[v] == HELD:
                        self._release(v, at)
        elif cc == midi.CC_ALL_SOUND_OFF:
            self.fade_all(at, ch)
        elif cc == midi.CC_ALL_NOTES_OFF:
            for v in range(pool.n_active):
                if pool.channel[v] == ch and pool.state[v] == SOUNDING:
                    if chan.sustain[ch]:
                        pool.state[v] = HELD
                    else:
                        self._release(v, at)
        elif cc == midi.CC_RESET_CONTROLLERS:
            held = chan.sustain[ch]
            chan.reset_controllers(ch)
            self.bends_changed = True
            if held:
                self.control(at, ch, midi.CC_SUSTAIN, 0)
        elif cc == midi.CC_RPN_MSB:
            chan.rpn[ch] = (value, chan.rpn[ch][1])
        elif cc == midi.CC_RPN_LSB:
            chan.rpn[ch] = (chan.rpn[ch][0], value)
        elif cc in (midi.CC_NRPN_MSB, midi.CC_NRPN_LSB):
            chan.rpn[ch] = midi.RPN_NULL
        elif cc == midi.CC_DATA_ENTRY_MSB or cc == midi.CC_DATA_ENTRY_LSB:
            msb = value if cc == midi.CC_DATA_ENTRY_MSB else None
            lsb = value if cc == midi.CC_DATA_ENTRY_LSB else None
            if chan.data_entry(ch, msb, lsb):
                self.bends_changed = True
        else:
            if cc == midi.CC_TIMBRE:
                chan.timbre[ch] = value / 127.0
            self.router.on_cc(ch, cc, value)
