"""The voice renderer: the voice pool's modes into one block of samples.

How a block is computed. Every sounding mode m contributes Re(g_m s_m p_m^n) at
sample n. With n = n1 + N1 n2 and p^n = A[n1] B[n2] (see :mod:`.voices`), the
block for all voices at once is the complex product Y = (B * (g s))^T A of shape
(N2, N1): a matrix-matrix product, so BLAS reuses each table entry N2 times
instead of streaming an N x M table per block. The product runs over the modes
that can still be heard only (:mod:`.live_modes`). C = B * (g s) is kept from block
to block and advanced by p^N like the amplitudes (worked out afresh for slots that
change otherwise, and for all every 40 ms: :mod:`.bookkeeping`). Voices changed by the
performer inside the block (note-on, note-off, steal) are rendered on the exact
per-voice path with the change on its sample (:mod:`.exact_path`). Live pickup and
gain changes are smoothed and ramped linearly across the block (:mod:`.smoothing`),
so they neither click nor zipper.

The output filter (output scale, electronics, DC blocker) acts on modes, not on
samples: its steady gain H(p) rides on each mode's weight, and its free response
after each change is added by :class:`~rtvoice.engine.modal_filter.ModalFilter`,
so no block is filtered (the same output as filtering the samples).

On a fretted instrument each voice's stretch, loss law, initial amplitudes and pickup
weights follow its place (string and fret: :mod:`.places`); under the open rule every
voice shares the sound's.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from rtvoice.engine.bookkeeping import SlotMarks
from rtvoice.engine.changes import Excitation, VoiceChange
from rtvoice.engine.instrument import MAX_PLACES, Instrument
from rtvoice.engine.live_modes import LiveProduct, WeightSet
from rtvoice.engine.midi import ChannelState
from rtvoice.engine.modal_filter import ModalFilter
from rtvoice.engine.note_starts import NoteStarts
from rtvoice.engine.note_tables import NoteTables
from rtvoice.engine.notes import harmonic_stretch, initial_amplitudes, velocity_gain
from rtvoice.engine.output import OUTPUT_SCALE
from rtvoice.engine.pickup_sums import PickupSums
from rtvoice.engine.places import PlaceModel
from rtvoice.engine.settings import Settings
from rtvoice.engine.voices import VoicePool, as_run
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.pickup import velocity_factor
from rtvoice.physics.tuning import midi_note_to_hz

#: () -> (b, a): the linear output stage for the settings now (see :func:`~rtvoice.engine.output.output_stage`).
OutputStage = Callable[[], tuple[np.ndarray, np.ndarray]]


class VoiceRenderer:
    """The voice pool (built by :meth:`build`) and everything that renders it at ``sample_rate_hz`` in
    blocks of ``block_frames``: the power tables (kept per note), the pickup weights, the output
    filter folded onto the modes and the block product.

    ``output_stage()`` gives the (b, a) of the linear output stage for the settings now (see
    :func:`~rtvoice.engine.output.output_stage`). ``out`` holds the last block (before the output
    gain and the limiter), ``exact`` the exact path's share of it (see :mod:`.exact_path`).
    """

    def __init__(self, settings: Settings, sample_rate_hz: float, block_frames: int, output_stage: OutputStage):
        self.settings = settings
        self.output_stage = output_stage
        self.fs = float(sample_rate_hz)
        self.block = int(block_frames)
        self.out = np.zeros(self.block)
        self.exact = np.zeros(self.block)
        self.exact_used = False  # some voice wrote into ``exact`` this block
        self.ramp = np.arange(1, self.block + 1) / self.block
        self.refolding = False  # new output-filter gains wait in gf_next (see prepare_electronics)
        self.swept = False  # a tiny-mode sweep ran: the live prefixes may have shrunk
        self.filter: ModalFilter  # output scale, coil filter and DC blocker, on the modes: prepare_electronics
        self._has_filter = False
        self.instrument = Instrument.from_settings(settings)
        self._pickups: Sequence[Mapping[str, Any]] = settings.pickups

    # -- set-up -------------------------------------------------------------------
    def build(self, voices: int, modes: int, pickups: Sequence[Mapping[str, Any]]) -> None:
        """A pool for ``voices`` notes (and room for a quarter more to fade) of ``modes`` modes, with
        everything derived from the settings worked out for it."""
        self._build_pool(voices, modes)
        self.prepare_notes()
        self.prepare_electronics()
        self.prepare_pickups(pickups)  # the weights per mode, for the new mode count

    def _build_pool(self, voices: int, modes: int) -> None:
        self.pool = VoicePool(voices + max(2, voices // 4), modes, self.block, self.fs)
        slots, modes = self.pool.slots, self.pool.modes
        n1, n2 = self.pool.n1, self.pool.n2
        self.g_next = np.zeros((slots, modes), complex)  # the ramp's target pickup weights
        self.gf_next = np.zeros((slots, modes), complex)  # and their product weights (g h)
        self.live = LiveProduct(self.pool)  # the block product's operands, for the modes still heard
        self.swept = False
        self.marks = SlotMarks(slots)
        self.sample_index = np.arange(n1 * n2)
        self.ramp_ext = np.concatenate([self.ramp, np.ones(n1 * n2)])  # ramp[start + j], past the end too
        self._stash = np.zeros((slots, modes), complex)
        self._views: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # (s, p_block) by number of active voices
        self._pickup_sums = PickupSums(modes)
        self.tables = NoteTables(self.pool, 3 * slots)  # room for each slot's note held, released and faded
        self.starts = NoteStarts(modes, self.fs, places=MAX_PLACES)
        self.places = PlaceModel(modes)

    def prepare_notes(self) -> None:
        """What the next note-on is made of: stretch, loss law, release, initial amplitudes."""
        s = self.settings
        self.stretch = harmonic_stretch(s.get("string.inharmonicity"), self.pool.modes)  # f_k / f0
        self.b1, self.b3 = loss_coefficients(s.get("string.t60_low"), s.get("string.t60_high"))
        self.release_t60_s = s.get("string.release")
        self.initial = initial_amplitudes(s, self.pool.modes)
        self.instrument = Instrument.from_settings(s)
        self.places.prepare(s, self.instrument, self.initial, self.stretch)
        # A fretted instrument plays a few places again and again (a tremolo re-plucks, so fades, each
        # note): room for every place's tables held and faded (40 KiB a place at 128 modes).
        self.tables = self.tables.with_room(self.pool, 2 * self.instrument.place_count)
        self.tables.clear()  # frequencies and decay rates may have changed

    def prepare_electronics(self) -> None:
        """The output filter, folded into the mode weights.

        A change while notes ring does not click: the ringing modes' weights ramp
        from the old filter's gains to the new one's across the next block (as a
        moving pickup's do), and the new filter carries on the old one's free response.
        """
        new = ModalFilter(*self.output_stage(), self.block)
        old = self.filter if self._has_filter else None
        self.filter, self._has_filter = new, True
        self.tables.clear()  # they hold the old filter's resolvents
        if old is None:
            return
        new.take_free_response(old)
        n = self.pool.n_active
        if n:
            self.resolve(slice(0, n), self.pool.p[:n])
            np.multiply(self.g_next[:n], self.pool.h[:n], out=self.gf_next[:n])
            self.refolding = True  # the next block ramps pool.gf to gf_next

    def prepare_pickups(self, pickups: Sequence[Mapping[str, Any]]) -> None:
        """The pickups' weight per mode, summed (displacement and velocity sensing apart)."""
        self._disp, self._vel = self._pickup_sums.update(pickups)
        self._pickups = pickups
        self.places.forget_pickups(self._disp, self._vel)
        n = self.pool.n_active
        if self.instrument.fretted and n:  # every fretted voice sees the pickups at its own place
            pool = self.pool
            pool.pickup_disp[:n], pool.pickup_vel[:n] = self.places.pickup_rows(pool.place[:n], pickups)

    def start_bound(self, velocity: int, place: int, excitation: Excitation | None) -> float:
        """The level bound a note-on will have, before its voice is set up (for stealing)."""
        amps = self.places.initial_for(place, excitation)
        return velocity_gain(velocity) * float(np.abs(amps) @ self.places.weight_abs(place, self._pickups))

    # -- weights ------------------------------------------------------------------
    def ramp_weights(self, n: int) -> None:
        """The ramp's target weights of slots 0..n-1: deriv * vel_sum + disp_sum per mode, and times h.

        Modes above the Nyquist margin need no mask here: their table rows are zero
        (see :meth:`VoicePool.update_tables_at`).
        """
        w = self.g_next[:n]
        pool = self.pool
        if self.instrument.fretted:
            np.multiply(pool.deriv[:n], pool.pickup_vel[:n], out=w)
            w += pool.pickup_disp[:n]
        else:
            np.multiply(pool.deriv[:n], self._vel, out=w)
            w += self._disp
        np.multiply(w, self.pool.h[:n], out=self.gf_next[:n])

    def set_weights(self, idx: slice | np.ndarray) -> None:
        """The pickup weights of slots ``idx`` (as :meth:`ramp_weights`), now and as the ramp's target.

        Their product weights follow when their tables are rebuilt (:meth:`flush_tables`).
        """
        idx = as_run(idx)
        pool = self.pool
        if self.instrument.fretted:
            g = pool.deriv[idx] * pool.pickup_vel[idx] + pool.pickup_disp[idx]
        else:
            g = pool.deriv[idx] * self._vel + self._disp
        self.pool.g[idx] = g
        self.g_next[idx] = g

    def resolve(self, slots: slice | np.ndarray, p: np.ndarray) -> None:
        """The output filter at the modes of ``slots`` (their p given): resolvents and gains H(p)."""
        pool = self.pool
        r = self.filter.resolvent(p)
        pool.h[slots] = self.filter.gain_from(r)
        r *= pool.audible[slots][..., None]  # a mode not heard is no input to the filter
        pool.r[slots] = r

    def _weigh(self, slots: slice | np.ndarray) -> None:
        """The product weights g h of ``slots``, now and as the ramp's target."""
        pool = self.pool
        slots = as_run(slots)
        pool.gf[slots] = pool.g[slots] * pool.h[slots]
        self.gf_next[slots] = self.g_next[slots] * pool.h[slots]

    def steady_states(self, idx: slice | np.ndarray) -> np.ndarray:
        """The output filter's steady state of each slot in ``idx`` (shape (len(idx), order)), from its modes now."""
        pool = self.pool
        idx = as_run(idx)
        return self.filter.steady_state(pool.r[idx], pool.g[idx] * pool.s[idx])

    def start_voices(self, starts: list[VoiceChange], channels: ChannelState) -> None:
        """Set up the voices of START changes (all at once): amplitudes, frequencies, decay, weights."""
        pool = self.pool
        idx = np.array([c.slot for c in starts])
        slots = as_run(idx)
        notes = [c.start for c in starts if c.start is not None]
        places = [c.place for c in notes]
        a4_hz = self.settings.get("tuning.a4_hz")
        fretted = self.instrument.fretted
        if fretted:
            rows: slice | np.ndarray = self.starts.rows(
                places, self.tables.epoch, lambda places: self.places.frequencies_hz(places, a4_hz),
                self.places.decay_rates)
        else:  # a place is a MIDI note
            rows = self.starts.rows(places, self.tables.epoch,
                                    lambda notes: midi_note_to_hz(notes, a4_hz)[:, None] * self.stretch,
                                    lambda _, freqs: decay_rate_per_s(freqs, self.b1, self.b3))
        rows = as_run(rows)  # one note: views, not gathers
        kept = self.starts
        velocity = np.array([c.velocity for c in notes], float)
        amp = velocity_gain(velocity)  # square-law velocity curve (common practice)
        if not fretted and all(c.excitation is None for c in notes):
            initial = self.initial
        else:
            initial = np.stack([self.places.initial_for(c.place, c.excitation) for c in notes])
        s = amp[:, None] * initial
        s *= kept.plucked[rows]  # no amplitude above the Nyquist margin
        pool.s[slots] = s
        pool.omega_base[slots] = kept.omega[rows]
        sigma = kept.sigma[rows]
        pool.sigma_hold[slots] = sigma
        pool.sigma[slots] = sigma
        if fretted:
            pool.pickup_disp[slots], pool.pickup_vel[slots] = self.places.pickup_rows(pool.place[slots], self._pickups)
        bend = np.array([channels.voice_bend(c.channel) for c in notes])
        if bend.any():
            self.set_bends(idx, bend)
        else:  # the kept rows of the unbent note (what set_bends would work out)
            pool.bend[slots] = 0.0
            pool.omega[slots] = kept.omega[rows]
            pool.omega1[slots] = kept.omega[rows, 0]
            pool.deriv[slots] = kept.deriv[rows]
            pool.audible[slots] = kept.audible[rows]
        self.set_weights(idx)

    def set_bends(self, idx: np.ndarray, bend: np.ndarray) -> None:
        """Retune slots ``idx`` by ``bend`` semitones from their unbent frequencies."""
        pool = self.pool
        factor = 2.0 ** (bend / 12.0)
        pool.bend[idx] = bend
        omega = pool.omega_base[idx] * factor[:, None]
        pool.omega[idx] = omega
        pool.omega1[idx] = omega[:, 0]
        pool.deriv[idx] = velocity_factor(pool.sigma_hold[idx], omega, omega[:, :1])
        pool.audible[idx] = omega < pool.omega_limit

    def apply_bends(self, channels: ChannelState) -> None:
        """Retune ringing voices to their channel's bend (takes effect at the block boundary)."""
        pool = self.pool
        n = pool.n_active
        if n == 0:
            return
        bend = np.array([channels.voice_bend(int(c)) for c in pool.channel[:n]])
        changed = np.flatnonzero(bend != pool.bend[:n])
        if changed.size:
            before = self.steady_states(changed)
            self.set_bends(changed, bend[changed])
            self.set_weights(changed)
            for v in changed:
                self.marks.mark_tables(int(v))
            self.flush_tables()
            self.filter.jump((before - self.steady_states(changed)).sum(axis=0))

    # -- the block ----------------------------------------------------------------
    def begin_block(self, pickups_moved: bool) -> bool:
        """Make ready for a block; True when its weights ramp (the pickups moved, or the output
        filter changed)."""
        if self.exact_used:
            self.exact[:] = 0.0
            self.exact_used = False
        ramping = pickups_moved or self.refolding
        self.refolding = False
        return ramping

    def render_bulk(self, ramping: bool) -> None:
        """The block product over every active voice into ``out`` (the exact path's share added),
        then the amplitudes and coefficients advanced to the next block."""
        pool, out, marks = self.pool, self.out, self.marks
        n = pool.n_active
        if n == 0:
            out[:] = 0.0
            marks.clear_touched()
            marks.all_stale = True
            return
        self.flush_tables()
        views = self._views.get(n)
        if views is None:
            views = self._views[n] = (pool.s[:n], pool.p_block[:n])
        live = self.live
        if live.prepare(n, self.swept):
            marks.all_stale = True
        self.swept = False
        self._refresh_coefficients(n)
        for v in marks.touched_list:  # rendered on the exact path this block
            live.silence(v)
        if ramping:  # the ramp's target weights: their coefficients afresh
            live.form(WeightSet.TARGET, self.gf_next, marks.touched_list)
        # Re(Y) = [Re C, Im C] . [Re A; -Im A]: one real product over 2 L rows.
        live.product(ramping)
        if ramping:
            old, new = live.samples
            np.subtract(new, old, out=out)
            out *= self.ramp
            out += old
        else:
            out[:] = live.samples[0]
        if self.exact_used:
            out += self.exact
        for v in marks.touched_list:
            self._stash[v] = pool.s[v]
        s_now, p_block = views
        s_now *= p_block
        for v in marks.touched_list:
            pool.s[v] = self._stash[v]
            marks.mark_stale(v)
        # The next block's coefficients: this block's (the ramp target's, whose weights the voices now
        # take) advanced by p^N, as the amplitudes were.
        live.advance(ramping)
        marks.clear_touched()

    def end_ramp(self) -> None:
        """The ramp is over: the voices take its target weights."""
        n = self.pool.n_active
        self.pool.g[:n] = self.g_next[:n]
        self.pool.gf[:n] = self.gf_next[:n]

    def _refresh_coefficients(self, n: int) -> None:
        """Work out afresh C^T = B^T (g s) of the slots whose amplitudes, weights or tables changed
        other than by a block's advance (all of them after a resync or a new packing)."""
        marks = self.marks
        stale = marks.stale_list
        if marks.all_stale or 4 * len(stale) > n:
            self.live.form(WeightSet.NOW, self.pool.gf)
            marks.all_stale = False
        elif stale:
            for v in stale:
                if v < n:
                    self.live.refresh(v)
        marks.clear_stale()

    def flush_tables(self, same_modes: set[int] | frozenset[int] = frozenset()) -> None:
        """Rebuild the marked slots' tables: copied from :class:`NoteTables` where kept, built (and kept) otherwise.

        ``same_modes``: marked slots whose amplitudes and heard modes did not change (a release, a
        fade), so their live prefix in the block product stays.
        """
        marks = self.marks
        marked = marks.tables_list
        if marked:
            pool = self.pool
            idx = np.array(marked)
            keys = [(int(pool.place[v]), int(pool.decay[v]), int(pool.epoch[v])) if pool.bend[v] == 0.0 else None
                    for v in idx]
            entries = self.tables.find(keys)
            kept = entries >= 0
            if kept.any():
                self.tables.load(pool, idx[kept], entries[kept])
            if not kept.all():
                built = idx[~kept]
                self.resolve(built, pool.update_tables_at(built))
                new: dict[tuple[int, int, int], int] = {}
                for v, key, entry in zip(idx, keys, entries, strict=True):
                    if entry < 0 and key is not None:
                        new.setdefault(key, v)  # one slot per key (the same note on two channels)
                if new:
                    self.tables.save(pool, np.array(list(new.values())), list(new))
            self._weigh(idx)
            self.live.renew(marked, pool.n_active, same_modes)  # the packed tables are copies
            for v in marked:
                marks.mark_stale(v)
            marks.clear_tables()

    # -- voices leaving -----------------------------------------------------------
    def free_slot(self, v: int) -> None:
        """Retire slot v's voice; the pool moves its last voice into v, whose coefficients are then stale."""
        self.live.retire(v, self.pool.retire(v))
        self.marks.mark_stale(v)

    def drop_bad_voices(self) -> int:
        """Retire every voice with a NaN or infinite amplitude and silence the block; how many went."""
        pool = self.pool
        bad = ~np.all(np.isfinite(pool.s[: pool.n_active]), axis=1)
        dropped = 0
        for v in sorted(np.flatnonzero(bad), reverse=True):
            self.free_slot(int(v))
            dropped += 1
        self.out[:] = 0.0
        self.filter.reset()
        self.marks.all_stale = True
        return dropped

    # -- what the meters and UI read ----------------------------------------------
    def loudest_voice(self) -> int:
        """Slot of the loudest active voice by the level bounds the retire check keeps, or -1."""
        n = self.pool.n_active
        return int(np.argmax(self.pool.level[:n])) if n else -1

    def mode_levels(self, v: int) -> np.ndarray:
        """|g s| of each mode of slot v in output units (before electronics and gain); 0 above the Nyquist margin."""
        pool = self.pool
        levels: np.ndarray = np.abs(pool.g[v] * pool.s[v]) * (OUTPUT_SCALE * pool.audible[v])
        return levels
