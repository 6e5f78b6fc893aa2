"""The voice pool: every sounding note's modes, held in flat arrays.

Slots 0..n_active-1 are sounding; a retired voice's slot is refilled from the
last active slot, so all work runs over one contiguous prefix and idle voices
cost nothing. Each mode m of slot v has a complex amplitude s[v, m] (double
precision: nothing drifts over minutes) that advances by p = exp((-sigma + i w) / fs)
per sample, a complex pickup weight g[v, m], the output filter's steady gain
h[v, m] = H(p) (see :mod:`rtvoice.engine.modal_filter`) and the weight the block
product uses, gf = g h.

Within a block of N samples, n = n1 + N1 n2 and p^n = A[n1] B[n2] with
A[j] = p^j (j < N1) and B[j] = p^(N1 j) (j <= N2). That turns the block's sum over
modes into one matrix product (see :mod:`rtvoice.engine.renderer`). Only the
real part of the block is wanted, so A is kept as real rows [Re A; -Im A] per mode
and B transposed (row j holds B[j] of every mode, contiguous): the product is then
one real single-precision GEMM over 2 M rows, half the arithmetic of the complex one.
"""

from __future__ import annotations

from enum import IntEnum

import numpy as np

from rtvoice.physics.modes import NYQUIST_MARGIN


class VoiceState(IntEnum):
    """Where a slot's voice is in its life (kept in the pool's int8 ``state`` array)."""

    FREE = 0  # no voice
    SOUNDING = 1  # key down
    RELEASED = 2  # key up: the release decay
    HELD = 3  # key up, held by the sustain pedal: still the held decay
    FADING = 4  # stolen, re-plucked or all sound off: a short fade, then retired


FREE, SOUNDING, RELEASED, HELD, FADING = VoiceState

MAX_NEPERS_PER_BLOCK = 300.0  # e^-300 = 5e-131: far below hearing, far above the subnormal floor (2e-308)
FLOAT32_FLOOR_NEPERS = 69.0  # e^-69 = 1e-30, above the single-precision subnormal floor (1.2e-38)
SILENT_MODE = 1e-30  # a mode amplitude below this (-600 dB) is set to zero (see VoicePool.clear_tiny_modes)


def block_split(block_frames: int, inner: int | None = None) -> tuple[int, int]:
    """(N1, N2) with N1 * N2 >= block_frames for the factored power tables.

    N1 is the inner size of the block product; 16 suits real-time blocks, 32 the
    longer offline blocks (measured with ``rtvoice bench``).
    """
    if inner is None:
        inner = 16 if block_frames <= 256 else 32
    n1 = min(inner, block_frames)
    n2 = -(-block_frames // n1)
    return n1, n2


def _powers_into(p: np.ndarray, out: np.ndarray) -> np.ndarray:
    """out[j] = p^j for j = 0..len(out)-1, by doubling: about 2 log2(len(out)) array products.

    Each step multiplies the powers found so far by the next power of two of p, so the
    work is vectorised over every mode of every voice at once (a cumulative product
    along a short axis is not).
    """
    count = out.shape[0]
    out[0] = 1.0
    if count > 1:
        out[1] = p
    done, step = 2, p * p
    while done < count:
        m = min(done, count - done)
        np.multiply(out[:m], step, out=out[done:done + m])
        done += m
        if done < count:
            step = step * step
    return out


class VoicePool:
    """Arrays for ``slots`` voices of ``modes`` modes each, for blocks of ``block_frames``."""

    def __init__(self, slots: int, modes: int, block_frames: int, sample_rate_hz: float):
        self.slots, self.modes = slots, modes
        self.block = block_frames
        self.fs = float(sample_rate_hz)
        self.n1, self.n2 = block_split(block_frames)
        self.omega_limit = 2 * np.pi * NYQUIST_MARGIN * self.fs  # rad/s: modes at or above it are not heard
        self.max_sigma = MAX_NEPERS_PER_BLOCK * self.fs / (self.n1 * self.n2)  # 1/s, see update_tables_at
        shape = (slots, modes)
        self.s = np.zeros(shape, complex)
        self.g = np.zeros(shape, complex)  # pickup weight
        self.h = np.zeros(shape, complex)  # the output filter's gain H(p) at each mode
        self.gf = np.zeros(shape, complex)  # g h: what the block product weighs each mode with
        self.r = np.zeros(shape + (3,), complex)  # the output filter's resolvent at p; 0 when not heard (ModalFilter)
        self.sigma = np.zeros(shape)  # current decay rate, 1/s
        self.sigma_hold = np.zeros(shape)  # decay rate while the note is held
        self.omega_base = np.zeros(shape)  # unbent angular frequency, rad/s
        self.omega = np.zeros(shape)  # bent angular frequency, rad/s
        self.p = np.zeros(shape, complex)  # p, as the tables hold it
        self.p_block = np.zeros(shape, complex)  # p^N
        self.p_block64 = np.zeros(shape, np.complex64)  # p^N in single precision (0 below 1e-30): advances C
        self.logp = np.zeros(shape, complex)  # log p = (-sigma + i omega) / fs
        # A_rows[v, m] = [Re A[v, m, :], -Im A[v, m, :]]; B_t[j, v, m] = B[v, m, j].
        self.A_rows = np.zeros((slots, modes, 2, self.n1), np.float32)
        self.B_t = np.zeros((self.n2 + 1, slots, modes), np.complex64)
        self.pickup_disp = np.zeros(shape)  # a fretted voice's own pickup sums (see engine.places), displacement
        self.pickup_vel = np.zeros(shape)  # ... and velocity sensing
        self.deriv = np.zeros(shape, complex)  # (-sigma_hold + i omega) / omega1: velocity pickup factor
        self.audible = np.zeros(shape)  # 1.0 for modes below the Nyquist margin, else 0.0
        # Per-slot facts.
        self.state = np.zeros(slots, np.int8)
        self.note = np.zeros(slots, np.int16)
        self.place = np.zeros(slots, np.int16)  # where it sounds: its note, or its string and fret (see instrument)
        self.velocity = np.zeros(slots, np.int16)  # note-on velocity 1..127
        self.channel = np.zeros(slots, np.int8)
        self.order = np.zeros(slots, np.int64)  # start order, for stealing ties
        self.fade_since = np.zeros(slots, np.int64)  # sample (since the engine started) its fade began
        self.omega1 = np.ones(slots)  # bent fundamental, rad/s: velocity-pickup reference
        self.bend = np.zeros(slots)  # semitones applied to omega
        self.decay = np.zeros(slots, np.int8)  # which decay rate its modes follow (see note_tables)
        self.epoch = np.zeros(slots, np.int64)  # the settings epoch its note started in (see note_tables)
        self.level = np.zeros(slots)  # the last measured bound of each slot (see Engine.loudest_voice)
        # np.zeros maps its pages lazily; write them now, so the first use of a slot (in the
        # audio callback) takes no page faults.
        for arr in (self.s, self.g, self.h, self.gf, self.r, self.sigma, self.sigma_hold, self.omega_base, self.omega,
                    self.p, self.p_block, self.p_block64, self.logp, self.A_rows, self.B_t, self.deriv,
                    self.audible, self.pickup_disp, self.pickup_vel):
            arr.fill(0.0)
        self.n_active = 0

    # -- tables -----------------------------------------------------------------
    def update_tables_at(self, slots: slice | np.ndarray) -> np.ndarray:
        """Rebuild the power tables of ``slots`` (a slice or an index array) from their sigma and omega.

        Returns p, the per-sample factor of each of their modes (as the tables hold it).

        A mode at or above :attr:`omega_limit` (a bend can push one there) gets zero
        rows in A, so no product hears it and the pickup weights need no mask; its
        amplitude still advances (by ``p_block`` and ``logp``, in double precision),
        so it returns when the bend comes back.
        """
        # A mode that would fall by more than MAX_NEPERS_PER_BLOCK in one block falls by that much:
        # it is silent either way, and its powers stay clear of subnormal numbers, on which
        # x86 arithmetic runs about a hundred times slower.
        sigma, omega = np.minimum(self.sigma[slots], self.max_sigma), self.omega[slots]
        logp = (-sigma + 1j * omega) / self.fs
        self.logp[slots] = logp
        p: np.ndarray = np.exp(logp)
        self.p[slots] = p
        a = _powers_into(p, np.empty((self.n1,) + p.shape, complex))  # a[j] = p^j
        b = _powers_into(a[-1] * p, np.empty((self.n2 + 1,) + p.shape, complex))  # b[j] = p^(N1 j)
        # The single-precision B entries that would be subnormal there (under e^-69) are zero.
        nepers = sigma * (self.n1 / self.fs)  # per step of B
        if nepers.max() * self.n2 > FLOAT32_FLOOR_NEPERS:
            b[nepers[None] * np.arange(self.n2 + 1)[:, None, None] > FLOAT32_FLOOR_NEPERS] = 0.0
        if omega.max() >= self.omega_limit:
            a[:, omega >= self.omega_limit] = 0.0
        rows = np.moveaxis(a, 0, -1)  # (voices, modes, N1)
        self.A_rows[slots, :, 0, :] = rows.real
        self.A_rows[slots, :, 1, :] = -rows.imag
        self.B_t[:, slots, :] = b
        p_block = np.exp(logp * self.block)
        self.p_block[slots] = p_block
        p_block[np.abs(p_block) < SILENT_MODE] = 0.0  # no single-precision subnormals
        self.p_block64[slots] = p_block
        return p

    def segments(self, slots: np.ndarray, d: np.ndarray, count: int) -> np.ndarray:
        """Re of sum over modes m of d[i, m] p[m]^j for each slot i and j = 0..count-1 (count <= N1 * N2).

        The same factoring and the same real single-precision product as the block
        (see :mod:`rtvoice.engine.renderer`), batched over ``slots``: returns float32
        samples of shape (len(slots), at least count).
        """
        rows = -(-count // self.n1)
        c = np.multiply(self.B_t[:rows, slots, :].transpose(1, 0, 2), d[:, None, :], dtype=np.complex64)
        y: np.ndarray = c.view(np.float32) @ self.A_rows[slots].reshape(len(slots), 2 * self.modes, self.n1)
        return y.reshape(len(slots), -1)

    # -- slots ------------------------------------------------------------------
    def allocate(self) -> int:
        """Index of a fresh slot at the end of the active prefix, or -1 when full."""
        if self.n_active >= self.slots:
            return -1
        v = self.n_active
        self.n_active += 1
        return v

    def retire(self, v: int) -> int:
        """Free slot v by moving the last active voice into it; returns the moved slot (or -1)."""
        last = self.n_active - 1
        moved = -1
        if v != last:
            for arr in (self.s, self.g, self.h, self.gf, self.r, self.sigma, self.sigma_hold, self.omega_base,
                        self.omega, self.p, self.p_block, self.p_block64, self.logp, self.A_rows, self.deriv,
                        self.pickup_disp, self.pickup_vel, self.audible,
                        self.state, self.note, self.place, self.channel, self.order, self.fade_since, self.omega1,
                        self.bend, self.velocity, self.decay, self.epoch, self.level):
                arr[v] = arr[last]
            self.B_t[:, v] = self.B_t[:, last]
            moved = last
        self.s[last] = 0.0
        self.g[last] = 0.0
        self.gf[last] = 0.0
        self.state[last] = FREE
        self.level[last] = 0.0
        self.n_active -= 1
        return moved

    def clear_tiny_modes(self, lo: int = 0, hi: int | None = None) -> None:
        """Zero mode amplitudes below SILENT_MODE (in active slots lo..hi-1, all by default).

        High modes die long before their voice does; left alone, their amplitudes
        would sink into subnormal numbers and slow every block down.
        """
        s = self.s[lo:self.n_active if hi is None else hi]
        s[np.abs(s) < SILENT_MODE] = 0.0

    def bound(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        """Upper bound of the output amplitude of active slots lo..hi-1 (all by default): sum over modes of |g s|."""
        hi = self.n_active if hi is None else hi
        level: np.ndarray = np.abs(self.g[lo:hi] * self.s[lo:hi]).sum(axis=1)
        return level


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
