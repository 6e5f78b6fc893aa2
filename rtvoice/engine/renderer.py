"""The engine: MIDI events in, one block of samples out.

The same :class:`Engine` renders offline and in real time; a host only feeds it
events (with their sample offset inside the block) and asks for blocks. It is two
halves and what joins them:

- the :class:`~rtvoice.engine.performer.Performer` reads the MIDI of a block and
  decides, in time order, what happens to which voice (start, release, fade, steal),
  with the controller map (:class:`~rtvoice.engine.control_router.ControlRouter`)
  beside it for every controller that moves a parameter;
- the :class:`~rtvoice.engine.voice_renderer.VoiceRenderer` carries those changes out
  (:mod:`.exact_path`) and renders every voice's modes in one block product;
- the engine takes new settings (live ones glide: :mod:`.smoothing`), applies the
  output gain and the limiter (:mod:`.output`) and has silent voices retired
  (:mod:`.housekeeping`).

How a block is computed is told in :mod:`.voice_renderer`.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from rtvoice.engine import midi
from rtvoice.engine.control_router import ControlRouter
from rtvoice.engine.controls import ControlMap, default_entries
from rtvoice.engine.events import EngineEvent
from rtvoice.engine.exact_path import apply_changes
from rtvoice.engine.housekeeping import Housekeeping
from rtvoice.engine.instrument import Instrument
from rtvoice.engine.notes import resonance_of
from rtvoice.engine.output import CEILING, OUTPUT_SCALE, Limiter, output_stage
from rtvoice.engine.performer import Performer
from rtvoice.engine.settings import Settings
from rtvoice.engine.smoothing import GainGlide, PickupGlide, smoothing_alpha
from rtvoice.engine.voice_renderer import VoiceRenderer
from rtvoice.engine.voices import VoicePool

#: Parameters the voice renderer's note set-up reads: what the next note-on is made of (``strings``
#: covers a change of the string count and every string's own fields).
NOTE_PARAM_PREFIXES = ("string.", "excitation.", "instrument.", "strings")
#: Parameters only the performer reads: where the next note sounds.
PLACING_PREFIXES = ("instrument.", "hand.", "strings")
#: Parameters that size the voice pool: a change fades every voice and rebuilds the pool.
POOL_PARAMS = ("voices", "string.modes")

Event = tuple[int, int, int, int]  # (sample offset in block, status, data1, data2): a MIDI channel message


@dataclass
class EngineStats:
    """What the meters show, updated every block."""

    voices: int = 0
    peak: float = 0.0
    gain_reduction_db: float = 0.0
    clipped: int = 0
    stolen: int = 0
    unplayable: int = 0  # note-ons no string could play (left out)
    dropped_bad: int = 0
    blocks: int = 0
    latency_frames: int = 0  # fixed: the limiter's look-ahead (every sample comes out this much later)


def _gain_of(settings: Settings) -> float:
    return float(10 ** (settings.get("output.gain_db") / 20))


class Engine:
    """A pool of string voices rendering fixed-size blocks at ``sample_rate_hz``.

    ``render(events)`` returns the next ``block_frames`` samples (float64, a view
    of an internal buffer that the next call overwrites). ``events`` are
    (offset, status, data1, data2) tuples of MIDI channel messages in time order.
    What it returns is ``stats.latency_frames`` late (a fixed delay: the output limiter's
    look-ahead, 1.5 ms, 72 frames at 48 kHz), which a host adds to the latency it reports.
    """

    def __init__(self, settings: Settings | None = None, sample_rate_hz: float = 48000.0,
                 block_frames: int = 256):
        if block_frames < 1 or block_frames > 8192:
            raise ValueError(f"block size {block_frames} must be between 1 and 8192 frames")
        if not 8000 <= sample_rate_hz <= 384000:
            raise ValueError(f"sample rate {sample_rate_hz} Hz must be between 8000 and 384000")
        self.fs = float(sample_rate_hz)
        self.block = int(block_frames)
        self.settings = settings or Settings.defaults()
        self.stats = EngineStats()
        # The sound's controller map acts here, so it acts alike live, offline and in the soak. What a
        # host must hear of (learned mappings, refused changes, moved values) waits in ``messages``.
        self.messages: deque[EngineEvent] = deque()
        self.controls = ControlMap(self.settings.controls)
        self.router = ControlRouter(self, self.controls, self.messages)
        alpha = smoothing_alpha(self.block, self.fs)
        self.glide = PickupGlide(self.settings.pickups, alpha)
        self.gain = GainGlide(_gain_of(self.settings), alpha, self.block)
        self.limiter = Limiter(self.fs, self.block)
        self.stats.latency_frames = self.limiter.latency_frames
        self.housekeeping = Housekeeping(self.block, self.fs)
        # The renderer asks for the output stage through the engine, so an engine that defines its
        # output otherwise (a test's reference without electronics) renders with that.
        self.voice_renderer = VoiceRenderer(self.settings, self.fs, self.block, self.output_filter)
        self.voices = self.settings.get("voices")
        self.voice_renderer.build(self.voices, self.settings.get("string.modes"), self.glide.now)
        self.performer = Performer(self.router, self.voice_renderer, self.voices, self.block)
        self.performer.attach(self.voice_renderer.pool, self.voices)
        self._place_notes()
        self._pending_rebuild: Settings | None = None

    @property
    def channels(self) -> midi.ChannelState:
        """The MIDI channel state (bend, RPN, sustain, MPE zones) the performer keeps."""
        return self.performer.channels

    @property
    def pool(self) -> VoicePool:
        """The voice pool (the engine's own modules and white-box tests only: others use :mod:`.readouts`)."""
        return self.voice_renderer.pool

    @property
    def initial(self) -> np.ndarray:
        """Initial mode amplitudes a full-velocity note-on would get now (read-only copy)."""
        return self.voice_renderer.initial.copy()

    def output_filter(self) -> tuple[np.ndarray, np.ndarray]:
        """(b, a) of the whole linear output stage, as for scipy.signal.lfilter: output scale, coil and cable
        low-pass (when not bypassed) and DC blocker, before the output gain and the limiter."""
        return output_stage(self.settings, self.fs)

    def resonance(self) -> tuple[float, float]:
        """(f_r in Hz, Q) of the electronics now in use; f_r = 0 when bypassed."""
        return resonance_of(self.settings)

    # -- settings -----------------------------------------------------------------
    def apply_settings(self, settings: Settings) -> None:
        """Take new settings: live ones act on ringing notes (smoothed), others on the next note.

        A change of ``voices`` or ``string.modes`` fades every voice and rebuilds the
        pool once they are silent.
        """
        old, self.settings = self.settings, settings
        changed = settings.differences(old)
        if not changed:
            return
        voices = self.voice_renderer
        voices.settings = settings
        self.glide.unsettle()
        if any(n in POOL_PARAMS for n in changed):
            self._pending_rebuild = settings
            self.performer.accepting = False
            self.performer.begin_block(self.stats.blocks)  # (the fades are dated by the block to come)
            self.performer.fade_all(0)
            return
        if any(n.startswith(PLACING_PREFIXES) for n in changed):
            self._place_notes()
        if any(n.startswith(NOTE_PARAM_PREFIXES) for n in changed):  # not for a moving pickup: 70 us saved
            voices.prepare_notes()
        elif any(n.startswith("tuning.") for n in changed):
            voices.tables.clear()
        if any(n.startswith("electronics.") for n in changed):
            voices.prepare_electronics()
        self.gain.target = _gain_of(settings)

    def _place_notes(self) -> None:
        """The performer places notes on strings and frets, unless every note is an open string."""
        instrument = Instrument.from_settings(self.settings)
        self.performer.instrument = instrument if instrument.fretted else None

    def load_sound(self, settings: Settings) -> None:
        """Play a whole sound: its settings and its controller map (the default map when it has none)."""
        self.apply_settings(settings)
        self.controls.set_entries(default_entries() if settings.controls is None else settings.controls)

    def set_value(self, name: str, value: Any) -> None:
        """Change one parameter by its canonical name (validated)."""
        self.apply_settings(self.settings.with_values({name: value}))

    # -- rendering ----------------------------------------------------------------
    def render(self, events: Iterable[Event] = ()) -> np.ndarray:
        """Render one block with ``events`` placed on their sample offsets.

        Events are handled in two passes. The performer makes every decision in time
        order (which voice starts, is released, faded or stolen) and records what
        changes in each voice at which sample; the voice renderer then renders the
        changed voices up to their changes and applies them, all voices at once per
        round, so a chord costs a few array operations rather than a few per note.
        """
        voices, performer, n_blk = self.voice_renderer, self.performer, self.block
        moved = self.glide.step(self.settings.pickups)
        if moved:
            voices.prepare_pickups(self.glide.now)
            voices.ramp_weights(voices.pool.n_active)
        ramping = voices.begin_block(moved)
        performer.begin_block(self.stats.blocks)
        for offset, status, d1, d2 in events:
            performer.handle(min(max(int(offset), 0), n_blk - 1), status, d1, d2)
        apply_changes(voices, performer.changes, performer.channels, ramping)
        voices.render_bulk(ramping)
        voices.filter.render_free(voices.out)
        if ramping:
            voices.end_ramp()
        if performer.bends_changed:
            performer.bends_changed = False
            voices.apply_bends(performer.channels)
        out = self._finish(voices.out)
        self.housekeeping.after_block(voices, self.stats.blocks, self.gain.gain, self._pending_rebuild is not None)
        self.stats.voices = voices.pool.n_active
        if self._pending_rebuild is not None and voices.pool.n_active == 0:
            self._rebuild()
        self.stats.stolen = performer.stolen
        self.stats.unplayable = performer.unplayable
        self.stats.dropped_bad = self.housekeeping.dropped_bad
        if self.router.pending:  # controllers moved in this block: the next ones hear the change
            self.router.after_block(self.stats.blocks * self.block / self.fs)
        return out

    def _finish(self, out: np.ndarray) -> np.ndarray:
        """The output gain (gliding) and the limiter on the block; a block with a NaN or infinite
        sample is silenced and the voices that caused it retired."""
        self.gain.apply(out)  # output scale, electronics and DC blocker are already on the modes
        limiter = self.limiter
        peak, peak_at = limiter.measure(out)
        if not math.isfinite(peak):  # a NaN or inf sample somewhere in the block
            self.housekeeping.dropped_bad += self.voice_renderer.drop_bad_voices()
            peak, peak_at = 0.0, 0
        limiter.apply(out, peak, peak_at)
        st = self.stats
        st.peak = limiter.peak
        st.gain_reduction_db = limiter.gain_reduction_db
        st.clipped = limiter.clipped
        st.blocks += 1
        return out

    def _rebuild(self) -> None:
        """The pool for the new voice and mode counts, once the old one has fallen silent."""
        self._pending_rebuild = None
        self.voices = self.settings.get("voices")
        self.voice_renderer.build(self.voices, self.settings.get("string.modes"), self.glide.now)
        self.performer.attach(self.voice_renderer.pool, self.voices)
        self.performer.accepting = True
        self.gain.target = _gain_of(self.settings)

    # -- what the meters and UI read ----------------------------------------------
    @property
    def live_columns(self) -> int:
        """Columns of the last block's product: the modes still heard, packed (0 when silent)."""
        return self.voice_renderer.live.columns if self.pool.n_active else 0

    def loudest_voice(self) -> int:
        """Slot of the loudest active voice by the level bounds the retire check keeps (at most
        RETIRE_CHECK_S old: a display's choice, with no pass over every mode), or -1."""
        return self.voice_renderer.loudest_voice()

    def mode_levels(self, v: int) -> np.ndarray:
        """|g s| of each mode of slot v in output units (before electronics and gain); 0 above the Nyquist margin."""
        return self.voice_renderer.mode_levels(v)


__all__ = ["CEILING", "OUTPUT_SCALE", "Engine", "EngineStats", "Event"]
