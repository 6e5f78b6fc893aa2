"""The block renderer: MIDI events in, one block of samples out.

The same :class:`Engine` renders offline and in real time; a host only feeds it
events (with their sample offset inside the block) and asks for blocks.

How a block is computed. Every sounding mode m contributes Re(g_m s_m p_m^n) at
sample n. With n = n1 + N1 n2 and p^n = A[n1] B[n2] (see :mod:`.voices`), the
block for all voices at once is the complex product Y = (B * (g s))^T A of shape
(N2, N1): a matrix-matrix product, so BLAS reuses each table entry N2 times
instead of streaming an N x M table per block. The product runs over the modes
that can still be heard only (:mod:`.live_modes`). C = B * (g s) is kept from block
to block and advanced by p^N like the amplitudes (worked out afresh for slots that
change otherwise, and for all every 40 ms). Voices touched by an event inside
the block (note-on, note-off, steal) are rendered on an exact per-voice path with
the event on its sample. Live pickup and gain changes are smoothed and ramped
linearly across the block, so they neither click nor zipper.

The output filter (output scale, electronics, DC blocker) acts on modes, not on
samples: its steady gain H(p) rides on each mode's weight, and its free response
after each change is added by :class:`~rtvoice.engine.modal_filter.ModalFilter`,
so no block is filtered (the same output as filtering the samples).
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
from rtvoice.engine.live_modes import LiveProduct
from rtvoice.engine.modal_filter import ModalFilter
from rtvoice.engine.note_starts import NoteStarts
from rtvoice.engine.note_tables import DECAY_HOLD, DECAY_RELEASE, NoteTables, faded
from rtvoice.engine.notes import harmonic_stretch, initial_amplitudes, resonance_of, velocity_gain
from rtvoice.engine.output import CEILING, Limiter, dc_blocker_coefficients
from rtvoice.engine.pickup_sums import PickupSums
from rtvoice.engine.settings import Settings
from rtvoice.engine.voices import FADING, HELD, RELEASED, SOUNDING, VoicePool
from rtvoice.physics.damping import LN_1000, decay_rate_per_s, loss_coefficients, release_rate_per_s
from rtvoice.physics.electronics import lowpass_biquad
from rtvoice.physics.pickup import velocity_factor
from rtvoice.physics.tuning import midi_note_to_hz

OUTPUT_SCALE = 0.25  # one full-velocity note peaks near -12 dBFS at 0 dB gain
RETIRE_LEVEL = 1e-5  # -100 dBFS: a voice whose bound falls below this is silent
RETIRE_CHECK_S = 0.01  # silent voices are looked for this often (the bound costs a pass over all modes)
#: Tiny mode amplitudes are zeroed about this often (at a retire check): from SILENT_MODE (1e-30) to
#: single precision's subnormal floor (1.2e-38) is 18.4 nepers, 53 ms even at the fade's rate.
TINY_CHECK_S = 0.04
FADE_T60_S = 0.02  # steal, re-pluck and all-sound-off fade
SMOOTHING_S = 0.015  # time constant of live parameter smoothing

#: Parameters that :meth:`Engine._prepare_notes` reads: what the next note-on is made of.
NOTE_PARAM_PREFIXES = ("string.", "excitation.")

Event = tuple[int, int, int, int]  # (sample offset in block, status, data1, data2)
START, RELEASE, FADE = 1, 2, 3  # what a recorded change does to a voice


@dataclass
class EngineStats:
    """What the meters show, updated every block."""

    voices: int = 0
    peak: float = 0.0
    gain_reduction_db: float = 0.0
    clipped: int = 0
    stolen: int = 0
    dropped_bad: int = 0
    blocks: int = 0
    latency_frames: int = 0  # fixed: the limiter's look-ahead (every sample comes out this much later)


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
        self.channels = midi.ChannelState()
        self.stats = EngineStats()
        # The sound's controller map acts here, so it acts alike live, offline and in the soak. What a
        # host must hear of (learned mappings, refused changes, moved values) waits in ``messages``.
        self.messages: deque[EngineEvent] = deque()
        self.controls = ControlMap(self.settings.controls)
        self.router = ControlRouter(self, self.controls, self.messages)
        self._alpha = 1.0 - math.exp(-self.block / (SMOOTHING_S * self.fs))
        self._order = 0
        self._retire_every = max(1, round(RETIRE_CHECK_S * self.fs / self.block))  # blocks
        self._tiny_every = max(1, math.floor(TINY_CHECK_S * self.fs / (self.block * self._retire_every)))  # checks
        self._out = np.zeros(self.block)
        self._exact = np.zeros(self.block)
        self._ramp = np.arange(1, self.block + 1) / self.block
        self._gain_ramp = np.empty(self.block)
        self.limiter = Limiter(self.fs, self.block)
        self.stats.latency_frames = self.limiter.latency_frames
        self._filter: ModalFilter  # output scale, coil filter and DC blocker, on the modes: _prepare_electronics
        self._gain = self._gain_target = 10 ** (self.settings.get("output.gain_db") / 20)
        self._pickups_now = [dict(p) for p in self.settings.pickups]
        self._pickups_settled = True  # now == target: the smoothing step has nothing to do
        self._exact_used = False  # some voice wrote into self._exact this block
        self._bend_dirty = False
        self._refolding = False  # new output-filter gains wait in _gf_next (see _prepare_electronics)
        self._pending_rebuild: Settings | None = None
        self._build_pool()
        self._prepare_notes()
        self._prepare_electronics()
        self._prepare_pickups()

    # -- set-up -------------------------------------------------------------------
    def _build_pool(self) -> None:
        voices = self.settings.get("voices")
        modes = self.settings.get("string.modes")
        self.voices = voices
        self.pool = VoicePool(voices + max(2, voices // 4), modes, self.block, self.fs)
        slots, modes = self.pool.slots, self.pool.modes
        n1, n2 = self.pool.n1, self.pool.n2
        self._g_next = np.zeros((slots, modes), complex)  # the ramp's target pickup weights
        self._gf_next = np.zeros((slots, modes), complex)  # and their product weights (g h)
        self._live = LiveProduct(self.pool)  # the block product's operands, for the modes still heard
        self._sweep_done = False  # a tiny-mode sweep ran: the live prefixes may have shrunk
        self._touched = np.zeros(slots, bool)
        self._stale = np.zeros(slots, bool)  # block coefficients to work out afresh (see _refresh_coefficients)
        self._stale_list: list[int] = []
        self._all_stale = True
        self._upto = np.zeros(slots, np.int64)
        self._touched_list: list[int] = []
        self._dirty = np.zeros(slots, bool)  # tables to rebuild (see _mark_tables)
        self._dirty_list: list[int] = []
        # (slot, sample, kind, data) recorded by the first pass of a block
        self._changes: list[tuple[int, int, int, Any]] = []
        self._sample_index = np.arange(n1 * n2)
        self._ramp_ext = np.concatenate([self._ramp, np.ones(n1 * n2)])  # ramp[start + j], past the end too
        self._bound_block = -1  # the block in which pool.level was last refreshed for stealing (see _bounds)
        self._stash = np.zeros((slots, modes), complex)
        self._views: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # (s, p_block) by number of active voices
        self._pickup_sums = PickupSums(modes)
        self._tables = NoteTables(self.pool, 3 * slots)  # room for each slot's note held, released and faded
        self._starts = NoteStarts(modes, self.fs)

    def _prepare_notes(self) -> None:
        s = self.settings
        self._stretch = harmonic_stretch(s.get("string.inharmonicity"), self.pool.modes)  # f_k / f0
        self._b1, self._b3 = loss_coefficients(s.get("string.t60_low"), s.get("string.t60_high"))
        self._release_t60 = s.get("string.release")
        self._initial = initial_amplitudes(s, self.pool.modes)
        self._weight_abs = None  # see _start_bound
        self._tables.clear()  # frequencies and decay rates may have changed

    @property
    def initial(self) -> np.ndarray:
        """Initial mode amplitudes a full-velocity note-on would get now (read-only copy)."""
        return self._initial.copy()

    def excitation_initial(self, position: float, width: float) -> np.ndarray:
        """Initial mode amplitudes of an excitation at ``position`` with ``width`` (per-note control)."""
        return initial_amplitudes(self.settings, self.pool.modes, position, width)

    def output_filter(self) -> tuple[np.ndarray, np.ndarray]:
        """(b, a) of the whole linear output stage, as for scipy.signal.lfilter: output scale, coil and cable
        low-pass (when not bypassed) and DC blocker, before the output gain and the limiter."""
        f_r, q = self.resonance()
        b, a = dc_blocker_coefficients(self.fs)
        b = b * OUTPUT_SCALE
        if f_r > 0:
            coil_b, coil_a = lowpass_biquad(f_r, q, self.fs)
            b, a = np.convolve(coil_b, b), np.convolve(coil_a, a)
        return b, a

    def _prepare_electronics(self) -> None:
        """The output filter, folded into the mode weights.

        A change while notes ring does not click: the ringing modes' weights ramp
        from the old filter's gains to the new one's across the next block (as a
        moving pickup's do), and the new filter carries on the old one's free response.
        """
        new = ModalFilter(*self.output_filter(), self.block)
        old: ModalFilter | None = getattr(self, "_filter", None)  # None on the first call, from __init__
        self._filter = new
        self._tables.clear()  # they hold the old filter's resolvents
        if old is None:
            return
        new.take_free_response(old)
        n = self.pool.n_active
        if n:
            self._resolve(slice(0, n), self.pool.p[:n])
            np.multiply(self._g_next[:n], self.pool.h[:n], out=self._gf_next[:n])
            self._refolding = True  # the next block ramps pool.gf to _gf_next

    def resonance(self) -> tuple[float, float]:
        """(f_r in Hz, Q) of the electronics now in use; f_r = 0 when bypassed."""
        return resonance_of(self.settings)

    def _prepare_pickups(self) -> None:
        self._disp, self._vel = self._pickup_sums.update(self._pickups_now)
        self._weight_abs = None  # see _start_bound

    def _start_bound(self, velocity: int, initial: np.ndarray | None) -> float:
        """The level bound a note-on will have, before its voice is set up (for stealing).

        |g| ~ |disp + i (w_k / w_1) vel| for each mode: the pickup weight without the
        small damping term of the velocity factor.
        """
        if self._weight_abs is None:
            self._weight_abs = np.abs(self._disp + 1j * self._stretch * self._vel)
        amps = self._initial if initial is None else initial
        return velocity_gain(velocity) * float(np.abs(amps) @ self._weight_abs)

    def _ramp_weights(self, n: int) -> None:
        """The ramp's target weights of slots 0..n-1: deriv * vel_sum + disp_sum per mode, and times h.

        Modes above the Nyquist margin need no mask here: their table rows are zero
        (see :meth:`VoicePool.update_tables_at`).
        """
        w = self._g_next[:n]
        np.multiply(self.pool.deriv[:n], self._vel, out=w)
        w += self._disp
        np.multiply(w, self.pool.h[:n], out=self._gf_next[:n])

    def _set_weights(self, idx: slice | np.ndarray) -> None:
        """The pickup weights of slots ``idx`` (as :meth:`_ramp_weights`), now and as the ramp's target.

        Their product weights follow when their tables are rebuilt (:meth:`_flush_tables`).
        """
        idx = as_run(idx)
        g = self.pool.deriv[idx] * self._vel + self._disp
        self.pool.g[idx] = g
        self._g_next[idx] = g

    def _resolve(self, slots: slice | np.ndarray, p: np.ndarray) -> None:
        """The output filter at the modes of ``slots`` (their p given): resolvents and gains H(p)."""
        pool = self.pool
        r = self._filter.resolvent(p)
        pool.h[slots] = self._filter.gain_from(r)
        r *= pool.audible[slots][..., None]  # a mode not heard is no input to the filter
        pool.r[slots] = r

    def _weigh(self, slots: slice | np.ndarray) -> None:
        """The product weights g h of ``slots``, now and as the ramp's target."""
        pool = self.pool
        slots = as_run(slots)
        pool.gf[slots] = pool.g[slots] * pool.h[slots]
        self._gf_next[slots] = self._g_next[slots] * pool.h[slots]

    def _steady_states(self, idx: slice | np.ndarray) -> np.ndarray:
        """The output filter's steady state of each slot in ``idx`` (shape (len(idx), order)), from its modes now."""
        pool = self.pool
        idx = as_run(idx)
        return self._filter.steady_state(pool.r[idx], pool.g[idx] * pool.s[idx])

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
        self._pickups_settled = False
        if any(n in ("voices", "string.modes") for n in changed):
            self._pending_rebuild = settings
            self._fade_all(0)
            return
        if any(n.startswith(NOTE_PARAM_PREFIXES) for n in changed):  # not for a moving pickup: 70 us saved
            self._prepare_notes()
        elif any(n.startswith("tuning.") for n in changed):
            self._tables.clear()
        if any(n.startswith("electronics.") for n in changed):
            self._prepare_electronics()
        self._gain_target = 10 ** (settings.get("output.gain_db") / 20)

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

        Events are handled in two passes. The first makes every decision in time
        order (which voice starts, is released, faded or stolen) and records what
        changes in each voice at which sample; the second renders the touched voices
        up to their changes and applies them, all voices at once per round, so a
        chord costs a few array operations rather than a few per note.
        """
        pool, n_blk = self.pool, self.block
        if self._exact_used:
            self._exact[:] = 0.0
            self._exact_used = False
        ramping = self._step_pickups() or self._refolding
        self._refolding = False
        for offset, status, d1, d2 in events:
            self._handle(min(max(int(offset), 0), n_blk - 1), status, d1, d2)
        self._apply_changes(ramping)
        self._render_bulk(ramping)
        self._filter.render_free(self._out)
        if ramping:
            n = pool.n_active
            pool.g[:n] = self._g_next[:n]
            pool.gf[:n] = self._gf_next[:n]
        if self._bend_dirty:
            self._apply_bends()
        out = self._finish()
        self._retire()
        if self.router.pending:  # controllers moved in this block: the next ones hear the change
            self.router.after_block(self.stats.blocks * self.block / self.fs)
        return out

    def _render_bulk(self, ramping: bool) -> None:
        pool, out = self.pool, self._out
        n = pool.n_active
        if n == 0:
            out[:] = 0.0
            self._clear_touched()
            self._all_stale = True
            return
        self._flush_tables()
        views = self._views.get(n)
        if views is None:
            views = self._views[n] = (pool.s[:n], pool.p_block[:n])
        live = self._live
        if live.prepare(n, self._sweep_done):
            self._all_stale = True
        self._sweep_done = False
        self._refresh_coefficients(n)
        for v in self._touched_list:  # rendered on the exact path this block
            live.silence(v)
        if ramping:  # the ramp's target weights: their coefficients afresh
            live.form(1, self._gf_next, self._touched_list)
        # Re(Y) = [Re C, Im C] . [Re A; -Im A]: one real product over 2 L rows.
        live.product(2 if ramping else 1)
        if ramping:
            old, new = live.samples
            np.subtract(new, old, out=out)
            out *= self._ramp
            out += old
        else:
            out[:] = live.samples[0]
        if self._exact_used:
            out += self._exact
        for v in self._touched_list:
            self._stash[v] = pool.s[v]
        s_now, p_block = views
        s_now *= p_block
        for v in self._touched_list:
            pool.s[v] = self._stash[v]
            self._mark_stale(v)
        # The next block's coefficients: this block's (the ramp target's, whose weights the voices now
        # take) advanced by p^N, as the amplitudes were.
        live.advance(ramping)
        self._clear_touched()

    def _refresh_coefficients(self, n: int) -> None:
        """Work out afresh C^T = B^T (g s) of the slots whose amplitudes, weights or tables changed
        other than by a block's advance (all of them after a resync or a new packing)."""
        stale = self._stale_list
        if self._all_stale or 4 * len(stale) > n:
            self._live.form(0, self.pool.gf)
            self._all_stale = False
        elif stale:
            for v in stale:
                if v < n:
                    self._live.refresh(v)
        for v in stale:
            self._stale[v] = False
        stale.clear()

    def _mark_stale(self, v: int) -> None:
        """Slot v's block coefficients no longer follow from its last ones: work them out next block."""
        if not self._stale[v]:
            self._stale[v] = True
            self._stale_list.append(v)

    def _clear_touched(self) -> None:
        for v in self._touched_list:
            self._touched[v] = False
        self._touched_list.clear()

    def _touch(self, v: int, fresh_at: int | None = None) -> None:
        """Put slot v on the exact path for this block (from sample ``fresh_at`` for a new voice)."""
        if not self._touched[v]:
            self._touched[v] = True
            self._upto[v] = 0 if fresh_at is None else fresh_at
            self._touched_list.append(v)

    def _apply_changes(self, ramping: bool) -> None:
        """Second pass: render each touched voice up to its next change, apply the changes, repeat.

        A voice's changes on the same sample (a note-off and the re-pluck's fade, say)
        are one step: its tables, steady state and the output filter's kick are worked
        out once, for where the last of them leaves it.
        """
        changes = self._changes
        if changes:
            queues: dict[int, list[list[tuple[int, int, int, Any]]]] = {}
            for change in changes:
                steps = queues.setdefault(change[0], [])
                if steps and steps[-1][0][1] == change[1]:
                    steps[-1].append(change)
                else:
                    steps.append([change])
            changes.clear()
            depth = max(len(q) for q in queues.values())
            for step in range(depth):
                now = [q[step] for q in queues.values() if len(q) > step]
                self._render_segments([g[0][0] for g in now], [g[0][1] for g in now], ramping)
                idx = np.array([g[0][0] for g in now])
                # A fresh slot starts from silence: its steady state before is zero.
                stale = [i for i, g in enumerate(now) if not (g[0][2] == START and g[0][3][4])]
                before = np.zeros((len(now), self._filter.order))
                if stale:
                    before[stale] = self._steady_states(idx[stale])
                # A start sets the voice up anew: what came before it on its sample no longer matters.
                now = [g[max((i for i, c in enumerate(g) if c[2] == START), default=0):] for g in now]
                starts = [g[0] for g in now if g[0][2] == START]
                if starts:
                    self._start_voices(starts)
                pool = self.pool
                for group in now:
                    v = group[0][0]
                    for _, _, kind, _ in group:
                        if kind == RELEASE:
                            pool.sigma[v] = release_rate_per_s(pool.sigma_hold[v], self._release_t60)
                            pool.decay[v] = DECAY_RELEASE
                        elif kind == FADE:
                            np.maximum(pool.sigma[v], LN_1000 / FADE_T60_S, out=pool.sigma[v])
                            pool.decay[v] = faded(pool.decay[v])
                        else:
                            pool.decay[v] = DECAY_HOLD
                            pool.epoch[v] = self._tables.epoch
                    self._mark_tables(v)
                # A release or fade changes decay rates only: its slot's heard modes stay as they are.
                self._flush_tables(same_modes={g[0][0] for g in now if g[0][2] != START})
                # The output filter's free response to each change, from where its voice stands (with
                # events in time order, the change's own sample).
                at = np.maximum([g[0][1] for g in now], self._upto[idx])
                self._filter.kicks(before - self._steady_states(idx), at, self._exact)
                self._exact_used = True
        # A voice changed only at sample 0 is as good as untouched: the block product renders it.
        touched = self._touched_list
        if any(self._upto[v] == 0 for v in touched):
            for v in [v for v in touched if self._upto[v] == 0]:
                self._touched[v] = False
            touched[:] = [v for v in touched if self._touched[v]]
        if touched:
            self._render_segments(touched, [self.block] * len(touched), ramping)

    def _render_segments(self, slots: list[int], stops: list[int], ramping: bool) -> None:
        """Render each of ``slots`` on the exact path from where it stands up to its sample in ``stops``."""
        pool = self.pool
        upto = self._upto
        # The few slots with samples left to render, picked in Python (changes on the block's first
        # sample have none, and then no array is made at all).
        todo = [(v, stop) for v, stop in zip(slots, stops, strict=True) if stop > upto[v]]
        if not todo:
            return
        idx = np.array([v for v, _ in todo])
        stop = np.array([t for _, t in todo])
        start = upto[idx]
        count = stop - start
        s = pool.s[idx]
        y = pool.segments(idx, pool.gf[idx] * s, int(count.max()))
        if ramping:
            y_next = pool.segments(idx, self._gf_next[idx] * s, int(count.max()))
            y_next -= y
            y_next *= self._ramp_ext[start[:, None] + self._sample_index[: y.shape[1]]]
            y += y_next
        exact = self._exact
        for i in range(idx.size):
            exact[start[i]:stop[i]] += y[i, : count[i]]
        self._exact_used = True
        pool.s[idx] = s * np.exp(pool.logp[idx] * count[:, None])  # double precision: nothing drifts
        self._upto[idx] = stop

    def _mark_tables(self, v: int) -> None:
        """Slot v's sigma or omega changed: rebuild its tables before they are next read.

        The rebuilds of a block are done together (one vectorised call for a whole chord).
        """
        if not self._dirty[v]:
            self._dirty[v] = True
            self._dirty_list.append(v)

    def _flush_tables(self, same_modes: set[int] | frozenset[int] = frozenset()) -> None:
        """Rebuild the marked slots' tables: copied from :class:`NoteTables` where kept, built (and kept) otherwise.

        ``same_modes``: marked slots whose amplitudes and heard modes did not change (a release, a
        fade), so their live prefix in the block product stays.
        """
        if self._dirty_list:
            pool = self.pool
            idx = np.array(self._dirty_list)
            keys = [(int(pool.note[v]), int(pool.decay[v]), int(pool.epoch[v])) if pool.bend[v] == 0.0 else None
                    for v in idx]
            entries = self._tables.find(keys)
            kept = entries >= 0
            if kept.any():
                self._tables.load(pool, idx[kept], entries[kept])
            if not kept.all():
                built = idx[~kept]
                self._resolve(built, pool.update_tables_at(built))
                new: dict[tuple[int, int, int], int] = {}
                for v, key, entry in zip(idx, keys, entries, strict=True):
                    if entry < 0 and key is not None:
                        new.setdefault(key, v)  # one slot per key (the same note on two channels)
                if new:
                    self._tables.save(pool, np.array(list(new.values())), list(new))
            self._weigh(idx)
            self._live.renew(self._dirty_list, pool.n_active, same_modes)  # the packed tables are copies
            for v in self._dirty_list:
                self._mark_stale(v)
            self._dirty[self._dirty_list] = False
            self._dirty_list.clear()

    # -- events -------------------------------------------------------------------
    def _handle(self, at: int, status: int, d1: int, d2: int) -> None:
        kind, ch = status & 0xF0, status & 0x0F
        if kind == midi.NOTE_ON and d2 > 0:
            self._note_on(at, ch, d1 & 0x7F, d2 & 0x7F)
        elif kind == midi.NOTE_OFF or kind == midi.NOTE_ON:
            self._note_off(at, ch, d1 & 0x7F)
        elif kind == midi.CONTROL_CHANGE:
            self._control(at, ch, d1 & 0x7F, d2 & 0x7F)
        elif kind == midi.PITCH_BEND:
            self.channels.set_bend(ch, (d1 & 0x7F) | ((d2 & 0x7F) << 7))
            self._bend_dirty = True
        elif kind == midi.CHANNEL_PRESSURE:
            self.channels.pressure[ch] = (d1 & 0x7F) / 127.0
            self.router.on_pressure(ch, self.channels.pressure[ch])

    def _note_on(self, at: int, ch: int, note: int, velocity: int) -> None:
        if self._pending_rebuild is not None:
            return
        pool = self.pool
        n = pool.n_active
        state = pool.state[:n]
        # A re-plucked note stops its old vibration with a short fade, as a finger would.
        for v in self._slots_of(ch, note):
            if state[v] != FADING:
                self._fade(v, at)
        sounding = np.flatnonzero(state != FADING)
        if sounding.size >= self.voices:
            bound = self._bounds()[sounding]
            quiet = sounding[np.lexsort((pool.order[sounding], bound))[0]]  # quietest, then oldest
            self._fade(int(quiet), at)
            self.stats.stolen += 1
        v = pool.allocate()
        fresh = v >= 0
        if not fresh:  # every slot busy: reuse the voice that has been fading longest (so the quietest)
            fading = pool.state[: pool.n_active] == FADING
            v = int(np.argmin(np.where(fading, pool.fade_since[: pool.n_active], np.iinfo(np.int64).max)))
            self._touch(v)
        else:
            self._touch(v, fresh_at=at)
        pool.state[v] = SOUNDING
        pool.note[v] = note
        pool.velocity[v] = velocity
        pool.channel[v] = ch
        self._order += 1
        pool.order[v] = self._order
        initial = self.router.note_excitation(ch)
        pool.level[v] = self._start_bound(velocity, initial)  # its level is not set up yet
        self._changes.append((v, at, START, (ch, note, velocity, initial, fresh)))

    def _bounds(self) -> np.ndarray:
        """Level bounds of the slots for stealing, computed once per block.

        A voice's bound falls by at most one block's decay within the block, so the
        choice of the quietest voice is the same as with fresh bounds but for near ties.
        Voices started in this block have the level their note-on gives them.
        """
        pool = self.pool
        if self._bound_block != self.stats.blocks:
            pool.level[: pool.n_active] = pool.bound()
            for v, _, kind, data in self._changes:
                if kind == START:
                    pool.level[v] = self._start_bound(data[2], data[3])
            self._bound_block = self.stats.blocks
        return pool.level

    def _start_voices(self, starts: list[tuple[int, int, int, Any]]) -> None:
        """Set up the voices of START changes (all at once): amplitudes, frequencies, decay, weights."""
        pool = self.pool
        idx = np.array([c[0] for c in starts])
        slots = as_run(idx)
        a4_hz = self.settings.get("tuning.a4_hz")
        rows: slice | np.ndarray = self._starts.rows([c[3][1] for c in starts], self._tables.epoch,
                                 lambda notes: midi_note_to_hz(notes, a4_hz)[:, None] * self._stretch,
                                 lambda freqs: decay_rate_per_s(freqs, self._b1, self._b3))
        rows = as_run(rows)  # one note: views, not gathers
        kept = self._starts
        velocity = np.array([c[3][2] for c in starts], float)
        amp = velocity_gain(velocity)  # square-law velocity curve (common practice)
        given = [c[3][3] for c in starts]
        initial = self._initial if all(i is None for i in given) else np.stack(
            [self._initial if i is None else i for i in given])
        s = amp[:, None] * initial
        s *= kept.plucked[rows]  # no amplitude above the Nyquist margin
        pool.s[slots] = s
        pool.omega_base[slots] = kept.omega[rows]
        sigma = kept.sigma[rows]
        pool.sigma_hold[slots] = sigma
        pool.sigma[slots] = sigma
        bend = np.array([self.channels.voice_bend(c[3][0]) for c in starts])
        if bend.any():
            self._set_bends(idx, bend)
        else:  # the kept rows of the unbent note (what _set_bends would work out)
            pool.bend[slots] = 0.0
            pool.omega[slots] = kept.omega[rows]
            pool.omega1[slots] = kept.omega[rows, 0]
            pool.deriv[slots] = kept.deriv[rows]
            pool.audible[slots] = kept.audible[rows]
        self._set_weights(idx)

    def _set_bends(self, idx: np.ndarray, bend: np.ndarray) -> None:
        pool = self.pool
        factor = 2.0 ** (bend / 12.0)
        pool.bend[idx] = bend
        omega = pool.omega_base[idx] * factor[:, None]
        pool.omega[idx] = omega
        pool.omega1[idx] = omega[:, 0]
        pool.deriv[idx] = velocity_factor(pool.sigma_hold[idx], omega, omega[:, :1])
        pool.audible[idx] = omega < pool.omega_limit

    def _note_off(self, at: int, ch: int, note: int) -> None:
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
        self._touch(v)
        self.pool.state[v] = RELEASED
        self._changes.append((v, at, RELEASE, None))

    def _fade(self, v: int, at: int) -> None:
        self._touch(v)
        self.pool.state[v] = FADING
        self.pool.fade_since[v] = self.stats.blocks * self.block + at
        self._changes.append((v, at, FADE, None))

    def _fade_all(self, at: int, channel: int | None = None) -> None:
        pool = self.pool
        for v in range(pool.n_active):
            if pool.state[v] != FADING and (channel is None or pool.channel[v] == channel):
                self._fade(v, at)

    def _control(self, at: int, ch: int, cc: int, value: int) -> None:
        chan, pool = self.channels, self.pool
        if cc == midi.CC_SUSTAIN:
            down = value >= 64
            chan.sustain[ch] = down
            if not down:
                for v in range(pool.n_active):
                    if pool.channel[v] == ch and pool.state[v] == HELD:
                        self._release(v, at)
        elif cc == midi.CC_ALL_SOUND_OFF:
            self._fade_all(at, ch)
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
            self._bend_dirty = True
            if held:
                self._control(at, ch, midi.CC_SUSTAIN, 0)
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
                self._bend_dirty = True
        else:
            if cc == midi.CC_TIMBRE:
                chan.timbre[ch] = value / 127.0
            self.router.on_cc(ch, cc, value)

    def _apply_bends(self) -> None:
        """Retune ringing voices to their channel's bend (takes effect at the block boundary)."""
        self._bend_dirty = False
        pool = self.pool
        n = pool.n_active
        if n == 0:
            return
        bend = np.array([self.channels.voice_bend(int(c)) for c in pool.channel[:n]])
        changed = np.flatnonzero(bend != pool.bend[:n])
        if changed.size:
            before = self._steady_states(changed)
            self._set_bends(changed, bend[changed])
            self._set_weights(changed)
            for v in changed:
                self._mark_tables(int(v))
            self._flush_tables()
            self._filter.jump((before - self._steady_states(changed)).sum(axis=0))

    # -- live parameters ----------------------------------------------------------
    def _step_pickups(self) -> bool:
        """Move the pickups one smoothing step towards their targets; True when they moved."""
        if self._pickups_settled:
            return False
        target = self.settings.pickups
        now = self._pickups_now
        moved = False
        if len(now) != len(target) or any(
            a["sensing"] != b["sensing"] or a["polarity"] != b["polarity"] for a, b in zip(now, target, strict=False)
        ):
            self._pickups_now = [dict(p) for p in target]
            moved = True
        else:
            for a, b in zip(now, target, strict=True):
                for f in ("position", "width", "level_db"):
                    diff = b[f] - a[f]
                    if diff != 0.0:
                        step = diff * self._alpha
                        a[f] = b[f] if abs(diff - step) < 1e-7 * max(1.0, abs(b[f])) else a[f] + step
                        moved = True
        if not moved:
            self._pickups_settled = True
            return False
        self._prepare_pickups()
        self._ramp_weights(self.pool.n_active)
        return True

    def _finish(self) -> np.ndarray:
        out = self._out
        g0 = self._gain
        g1 = g0 + (self._gain_target - g0) * self._alpha
        if abs(g1 - self._gain_target) < 1e-6 * self._gain_target:
            g1 = self._gain_target
        # Output scale, electronics and DC blocker are already on the modes (see _prepare_electronics).
        if g0 == g1:
            if g1 != 1.0:
                out *= g1
        else:
            np.multiply(self._ramp, g1 - g0, out=self._gain_ramp)
            self._gain_ramp += g0
            out *= self._gain_ramp
        self._gain = g1
        limiter = self.limiter
        peak, peak_at = limiter.measure(out)
        if not math.isfinite(peak):  # a NaN or inf sample somewhere in the block
            self._drop_bad_voices()
            out[:] = 0.0
            self._filter.reset()
            self._all_stale = True
            peak, peak_at = 0.0, 0
        limiter.apply(out, peak, peak_at)
        st = self.stats
        st.peak = limiter.peak
        st.gain_reduction_db = limiter.gain_reduction_db
        st.clipped = limiter.clipped
        st.blocks += 1
        return out

    def _drop_bad_voices(self) -> None:
        pool = self.pool
        bad = ~np.all(np.isfinite(pool.s[: pool.n_active]), axis=1)
        for v in sorted(np.flatnonzero(bad), reverse=True):
            self._free_slot(int(v))
            self.stats.dropped_bad += 1

    def _free_slot(self, v: int) -> None:
        """Retire slot v's voice; the pool moves its last voice into v, whose coefficients are then stale."""
        self._live.retire(v, self.pool.retire(v))
        self._mark_stale(v)

    def _retire(self) -> None:
        pool = self.pool
        if pool.n_active and (self.stats.blocks % self._retire_every == 0 or self._pending_rebuild is not None):
            # One pass over every slot now and then, not a share of them in every block: each
            # numpy call costs its overhead whatever its size (measured under JACK: the share
            # cost nearly what the whole pass did, in every block).
            checks = self.stats.blocks // self._retire_every
            if checks % self._tiny_every == 0 or self._pending_rebuild is not None:
                pool.clear_tiny_modes()
                self._all_stale = True  # and the coefficients, advanced in single precision, are resynced
                self._sweep_done = True  # and the modes that died leave the product
            pool.level[: pool.n_active] = pool.bound()
            bound = pool.level[: pool.n_active] * (OUTPUT_SCALE * max(self._gain, 1.0))
            dead = np.flatnonzero(~(bound >= RETIRE_LEVEL))  # catches NaN too
            heard = dead[np.isfinite(bound[dead])]
            if heard.size:  # their input to the output filter stops: its state carries on freely
                self._filter.jump(self._steady_states(heard).sum(axis=0))
            for v in dead[::-1]:
                if not np.isfinite(bound[v]):
                    self.stats.dropped_bad += 1
                self._free_slot(int(v))
        self.stats.voices = pool.n_active
        if self._pending_rebuild is not None and pool.n_active == 0:
            self._pending_rebuild = None
            self._build_pool()
            self._prepare_notes()
            self._prepare_electronics()
            self._prepare_pickups()  # the weights per mode, for the new mode count
            self._gain_target = 10 ** (self.settings.get("output.gain_db") / 20)

    # -- what the meters and UI read ----------------------------------------------
    @property
    def live_columns(self) -> int:
        """Columns of the last block's product: the modes still heard, packed (0 when silent)."""
        return self._live.columns if self.pool.n_active else 0

    def loudest_voice(self) -> int:
        """Slot of the loudest active voice by the level bounds the retire check keeps (at most
        RETIRE_CHECK_S old: a display's choice, with no pass over every mode), or -1."""
        n = self.pool.n_active
        return int(np.argmax(self.pool.level[:n])) if n else -1

    def mode_levels(self, v: int) -> np.ndarray:
        """|g s| of each mode of slot v in output units (before electronics and gain); 0 above the Nyquist margin."""
        pool = self.pool
        levels: np.ndarray = np.abs(pool.g[v] * pool.s[v]) * (OUTPUT_SCALE * pool.audible[v])
        return levels


def as_run(idx: slice | np.ndarray) -> slice | np.ndarray:
    """Slots ``idx`` as a slice when they are consecutive (one slot, a chord's new voices), else as given.

    Indexing the pool's arrays with a slice makes views; with an index array, gathers
    and scatters, which cost several times more for the few rows of an event.
    """
    if isinstance(idx, slice) or len(idx) == 0:
        return idx
    first, count = int(idx[0]), len(idx)
    if int(idx[-1]) - first != count - 1 or (count > 2 and not bool((np.diff(idx) == 1).all())):
        return idx
    return slice(first, first + count)


__all__ = ["CEILING", "Engine", "EngineStats", "Event"]
