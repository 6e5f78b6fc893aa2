"""The voice pool: every sounding note's modes, held in flat arrays.

Slots 0..n_active-1 are sounding; a retired voice's slot is refilled from the
last active slot, so all work runs over one contiguous prefix and idle voices
cost nothing. Each mode m of slot v has a complex amplitude s[v, m] (double
precision: nothing drifts over minutes) that advances by p = exp((-sigma + i w) / fs)
per sample, and a complex pickup weight g[v, m].

Within a block of N samples, n = n1 + N1 n2 and p^n = A[n1] B[n2] with
A[j] = p^j (j < N1) and B[j] = p^(N1 j) (j <= N2). That turns the block's sum over
modes into one matrix product (see :mod:`rtvoice.engine.renderer`). Only the
real part of the block is wanted, so A is kept as real rows [Re A; -Im A] per mode
and B transposed (row j holds B[j] of every mode, contiguous): the product is then
one real single-precision GEMM over 2 M rows, half the arithmetic of the complex one.
"""

from __future__ import annotations

import numpy as np

from rtvoice.physics.modes import NYQUIST_MARGIN

FREE, SOUNDING, RELEASED, HELD, FADING = 0, 1, 2, 3, 4


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


def _running_powers(p: np.ndarray, count: int) -> np.ndarray:
    """p^0 .. p^(count - 1) along a new last axis, by repeated multiplication (one cumprod)."""
    out = np.empty(p.shape + (count,), complex)
    out[..., 0] = 1.0
    out[..., 1:] = p[..., None]
    return np.cumprod(out, axis=-1, out=out)


class VoicePool:
    """Arrays for ``slots`` voices of ``modes`` modes each, for blocks of ``block_frames``."""

    def __init__(self, slots: int, modes: int, block_frames: int, sample_rate_hz: float):
        self.slots, self.modes = slots, modes
        self.block = block_frames
        self.fs = float(sample_rate_hz)
        self.n1, self.n2 = block_split(block_frames)
        self.omega_limit = 2 * np.pi * NYQUIST_MARGIN * self.fs  # rad/s: modes at or above it are not heard
        shape = (slots, modes)
        self.s = np.zeros(shape, complex)
        self.g = np.zeros(shape, complex)
        self.sigma = np.zeros(shape)  # current decay rate, 1/s
        self.sigma_hold = np.zeros(shape)  # decay rate while the note is held
        self.omega_base = np.zeros(shape)  # unbent angular frequency, rad/s
        self.omega = np.zeros(shape)  # bent angular frequency, rad/s
        self.p_block = np.zeros(shape, complex)  # p^N
        # A_rows[v, m] = [Re A[v, m, :], -Im A[v, m, :]]; B_t[j, v, m] = B[v, m, j].
        self.A_rows = np.zeros((slots, modes, 2, self.n1), np.float32)
        self.B_t = np.zeros((self.n2 + 1, slots, modes), np.complex64)
        self.deriv = np.zeros(shape, complex)  # (-sigma_hold + i omega) / omega1: velocity pickup factor
        self.audible = np.zeros(shape)  # 1.0 for modes below the Nyquist margin, else 0.0
        # Per-slot facts.
        self.state = np.zeros(slots, np.int8)
        self.note = np.zeros(slots, np.int16)
        self.velocity = np.zeros(slots, np.int16)  # note-on velocity 1..127
        self.channel = np.zeros(slots, np.int8)
        self.order = np.zeros(slots, np.int64)  # start order, for stealing ties
        self.omega1 = np.ones(slots)  # bent fundamental, rad/s: velocity-pickup reference
        self.bend = np.zeros(slots)  # semitones applied to omega
        self.n_active = 0

    # -- tables -----------------------------------------------------------------
    def update_tables(self, lo: int, hi: int) -> None:
        """Rebuild the power tables of slots lo..hi-1 from their sigma and omega.

        A mode at or above :attr:`omega_limit` (a bend can push one there) gets zero
        rows in A, so no product hears it and the pickup weights need no mask; its
        amplitude still advances (by ``p_block`` and :meth:`power`), so it returns
        when the bend comes back.
        """
        if hi <= lo:
            return
        logp = (-self.sigma[lo:hi] + 1j * self.omega[lo:hi]) / self.fs
        p = np.exp(logp)
        a = _running_powers(p, self.n1)
        b = _running_powers(a[..., -1] * p, self.n2 + 1)  # powers of p^N1
        a[self.omega[lo:hi] >= self.omega_limit] = 0.0
        self.A_rows[lo:hi, :, 0, :] = a.real
        self.A_rows[lo:hi, :, 1, :] = -a.imag
        self.B_t[:, lo:hi, :] = np.moveaxis(b, -1, 0)
        self.p_block[lo:hi] = np.exp(logp * self.block)

    def segment(self, v: int, d: np.ndarray, count: int) -> np.ndarray:
        """sum over modes m of d[m] p[m]^j for j = 0..count-1 (count <= N1 * N2), as complex samples.

        The same factoring as the block product, for one voice: (B * d)^T A, so no
        (modes x count) table of powers is ever built.
        """
        a, b = self._complex_tables(v)
        rows = -(-count // self.n1)
        return ((b[:, :rows] * d[:, None]).T @ a).reshape(-1)[:count]

    def power(self, v: int, j: int) -> np.ndarray:
        """p^j of slot v (every mode, heard or not)."""
        return np.exp((-self.sigma[v] + 1j * self.omega[v]) * (j / self.fs))

    def _complex_tables(self, v: int) -> tuple[np.ndarray, np.ndarray]:
        """(A, B) of slot v as complex arrays of shape (modes, N1) and (modes, N2 + 1)."""
        rows = self.A_rows[v]
        return rows[:, 0, :] - 1j * rows[:, 1, :], self.B_t[:, v, :].T

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
            for arr in (self.s, self.g, self.sigma, self.sigma_hold, self.omega_base, self.omega,
                        self.p_block, self.A_rows, self.deriv, self.audible, self.state, self.note,
                        self.channel, self.order, self.omega1, self.bend, self.velocity):
                arr[v] = arr[last]
            self.B_t[:, v] = self.B_t[:, last]
            moved = last
        self.s[last] = 0.0
        self.g[last] = 0.0
        self.state[last] = FREE
        self.n_active -= 1
        return moved

    def bound(self) -> np.ndarray:
        """Upper bound of each active voice's output amplitude: sum over modes of |g s|."""
        n = self.n_active
        return np.abs(self.g[:n] * self.s[:n]).sum(axis=1)
