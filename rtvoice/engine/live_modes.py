"""The block product over the modes that can still be heard, packed slot after slot.

A voice's high modes die long before its low ones (damping grows with frequency),
modes above the Nyquist margin are never heard, and a pluck leaves the modes on its
nodes at rounding residue (sin(k pi x) = 1e-16, not 0). The block product of
:mod:`rtvoice.engine.renderer` leaves them all out: active slot v contributes its
live prefix, modes 0 .. k_v - 1 up to its last heard mode with |s| >= LIVE_MODE,
and the prefixes are packed one after another into L columns. With 32 notes of 128
modes from E2 up, L is about half of 32 x 128 right after they are plucked and a
sixth a second later (measured with ``rtvoice bench``'s chord).

The packing holds copies of the tables the product reads (A rows, B^T, p^N) for the
packed columns, and the block coefficients C^T = B^T (g s) themselves. It is packed
afresh when many slots change at once (a chord, new settings), and at the engine's
tiny-mode sweep when the prefixes have shrunk or holes were left; between those the
prefixes only hold modes that were live, so nothing is lost. A few changes are
slice operations instead of a new packing: a voice that retires leaves a hole (its
columns masked out of the coefficients) and the voice the pool moves into its slot
keeps its columns; a slot whose tables change (a note starting, released, faded,
bent) gets its tables copied over its columns when its live prefix still fits
there, and otherwise leaves a hole and takes new columns after the last.
A mode left out contributes |g s| < 1e-15 |g| to a sample (|g| is at most a few
hundred): below -250 dBFS, far under the single-precision product's own rounding.
"""

from __future__ import annotations

from collections.abc import Iterable
from enum import Enum

import numpy as np

from rtvoice.engine.voices import VoicePool

LIVE_MODE = 1e-15  # a mode amplitude below this is left out of the block product
#: More slots than this changing tables in one block are packed afresh (one vectorised pass)
#: rather than one by one (a few numpy calls each).
RENEW_ONE_BY_ONE = 4


class WeightSet(Enum):
    """Which weights a set of coefficients is formed with: the voices' weights now, or the target
    of this block's ramp (a moving pickup, a new output filter). Its value is its row set in C."""

    NOW = 0
    TARGET = 1


class LiveProduct:
    """The packed operands and coefficients of the block product for one :class:`VoicePool`.

    ``pack(n)`` packs the live prefixes of active slots 0..n-1; until the next
    ``pack`` the methods work on those columns: ``form`` and ``refresh`` work out
    coefficients from the pool's weights and amplitudes, ``silence`` zeroes a slot's,
    ``product`` writes the block (``samples``), ``advance`` moves them on by p^N.
    """

    def __init__(self, pool: VoicePool):
        self.pool = pool
        slots, modes, n1, n2 = pool.slots, pool.modes, pool.n1, pool.n2
        cap = slots * modes
        self.n1, self.n2 = n1, n2
        self.cap = cap
        self._a = np.zeros((2 * cap, n1), np.float32)
        # B^T and C^T keep a leading dimension of cap, so columns can be added without moving the others.
        self._bt = np.zeros((n2, cap), np.complex64)
        self._pb = np.zeros(cap, np.complex64)
        self._ct = np.zeros((2 * n2, cap), np.complex64)
        self._keep = np.zeros(cap, np.float32)  # 1 for a slot's columns, 0 for a hole's
        self._d = np.zeros(cap, np.complex64)
        self._g = np.zeros(cap, complex)
        self._s = np.zeros(cap, complex)
        self._cols = np.zeros(cap, np.intp)
        self._iota = np.arange(cap, dtype=np.intp)
        self._slot_start = np.arange(slots, dtype=np.intp) * modes  # flat index of each slot's mode 0
        self._a_flat = pool.A_rows.reshape(cap, 2 * n1)
        self._bt_flat = pool.B_t[:n2].reshape(n2, cap)
        self._pb_flat = pool.p_block64.reshape(cap)
        self.start = np.zeros(slots + 1, np.intp)  # slot v's packed columns: start[v] .. start[v] + live[v] - 1
        self.live = np.zeros(slots, np.intp)  # k_v
        self.y = np.zeros((2 * n2, n1), np.float32)
        flat = self.y.reshape(-1)
        half = n1 * n2
        self.samples = (flat[: pool.block], flat[half: half + pool.block])  # weight sets NOW and TARGET
        self.valid = False  # False: the slots or their tables changed; pack before the next product
        self.n = 0
        self.columns = 0  # L
        self.holes = 0  # columns left as holes since the packing (packed away at the next sweep)
        self._views(0)

    def live_prefixes(self, n: int) -> np.ndarray:
        """k_v of active slots 0..n-1: one past each slot's last heard mode with |s| >= LIVE_MODE."""
        pool = self.pool
        heard = np.abs(pool.s[:n]) >= LIVE_MODE
        heard &= pool.audible[:n] > 0
        last = np.argmax(heard[:, ::-1], axis=1)
        return np.where(heard.any(axis=1), pool.modes - last, 0)

    def prepare(self, n: int, swept: bool) -> bool:
        """Make the packing hold active slots 0..n-1: packed afresh when it is not valid or holds
        other slots, and after a tiny-mode sweep (``swept``) when the prefixes shrank or retired
        voices left holes. True when it packed: every coefficient must then be formed afresh."""
        if not self.valid or n != self.n:
            self.pack(n)
            return True
        if swept:
            k = self.live_prefixes(n)
            if self.holes or not np.array_equal(k, self.live[:n]):
                self.pack(n, k)
                return True
        return False

    def pack(self, n: int, k: np.ndarray | None = None) -> None:
        """Pack the live prefixes ``k`` (worked out when None) of slots 0..n-1, copying their tables;
        every coefficient must then be formed afresh."""
        if k is None:
            k = self.live_prefixes(n)
        start = self.start
        start[0] = 0  # (retire moves segments about)
        np.cumsum(k, out=start[1: n + 1])
        count = int(start[n])
        cols = self._cols[:count]
        # packed column c of slot v is its mode c - start[v]: flat index v * modes + c - start[v]
        np.subtract(self._iota[:count], np.repeat(start[:n] - self._slot_start[:n], k), out=cols)
        np.take(self._a_flat, cols, axis=0, out=self._a[: 2 * count].reshape(count, 2 * self.n1), mode="clip")
        np.take(self._bt_flat, cols, axis=1, out=self._bt[:, :count], mode="clip")
        np.take(self._pb_flat, cols, out=self._pb[:count], mode="clip")
        self._keep[:count] = 1.0
        self.live[:n] = k
        self.n, self.columns, self.valid, self.holes = n, count, True, 0
        self._views(count)

    def retire(self, v: int, moved: int) -> None:
        """The pool freed slot v and moved its slot ``moved`` into it (-1: none moved; see
        :meth:`VoicePool.retire`), leaving slot ``last`` = n - 1 empty with zero amplitudes."""
        if not self.valid:
            return
        last = self.n - 1
        lo, k = self.start[v], self.live[v]
        self._hole(lo, k)
        self.cols[lo: lo + k] += (last - v) * self.pool.modes  # (its columns now read the empty slot)
        if moved >= 0:
            lo, k = self.start[moved], self.live[moved]
            self.cols[lo: lo + k] -= (moved - v) * self.pool.modes
            self.start[v], self.live[v] = lo, k
        self.live[last] = 0
        self.n = last

    def _hole(self, lo: int, k: int) -> None:
        """Columns lo .. lo + k - 1 out of the product: no sound now, none from later coefficients."""
        self.holes += k
        self.ct[0][:, lo: lo + k] = 0.0
        self._keep[lo: lo + k] = 0.0

    def renew(self, slots: list[int], n: int, same_modes: Iterable[int] = ()) -> None:
        """Slots ``slots`` of active slots 0..n-1 have new tables (and amplitudes, for a new note):
        copy them over their columns, or into new columns after the last; pack afresh instead
        (marking the packing invalid) when many change, or there is no room. Slots in
        ``same_modes`` kept their amplitudes and heard modes (a release, a fade): their prefix is
        not looked for again. Their coefficients must then be worked out afresh (the renderer
        marks them stale)."""
        if not self.valid:
            return
        if len(slots) > RENEW_ONE_BY_ONE:
            self.valid = False
            return
        pool = self.pool
        for v in sorted(slots):
            if v >= n:
                continue
            if v < self.n and v in same_modes:
                self._copy(v, int(self.start[v]), int(self.live[v]))
                continue
            heard = np.abs(pool.s[v]) >= LIVE_MODE
            heard &= pool.audible[v] > 0
            k = pool.modes - int(np.argmax(heard[::-1])) if heard.any() else 0
            if v < self.n:
                lo, old = int(self.start[v]), int(self.live[v])
                if k <= old:  # fits where it is (its modes from k on are quiet but true: kept)
                    self._copy(v, lo, old)
                    continue
                self._hole(lo, old)
            elif v == self.n:
                self.n += 1
            else:  # a new slot after a gap: not a layout this packing can follow
                self.valid = False
                return
            lo = self.columns
            if lo + k > self.cap:
                self.valid = False
                return
            self._copy(v, lo, k)
            self.start[v], self.live[v] = lo, k
            self.columns = lo + k
            self._views(self.columns)

    def _copy(self, v: int, lo: int, k: int) -> None:
        """Slot v's tables for its modes 0..k-1 into columns lo .. lo + k - 1."""
        f, hi = int(self._slot_start[v]), lo + k
        self._a[2 * lo: 2 * hi] = self._a_flat[f: f + k].reshape(2 * k, self.n1)
        self._bt[:, lo:hi] = self._bt_flat[:, f: f + k]
        self._pb[lo:hi] = self._pb_flat[f: f + k]
        self._cols[lo:hi] = self._iota[f: f + k]
        self._keep[lo:hi] = 1.0

    def _views(self, count: int) -> None:
        n2 = self.n2
        ct = self._ct[:, :count]
        self.ct = (ct[:n2], ct[n2:])
        self.lhs = (self.ct[0].view(np.float32), ct.view(np.float32))  # [Re C, Im C] per mode, 1 or 2 sets
        self.a = self._a[: 2 * count]
        self.bt = self._bt[:, :count]
        self.pb = self._pb[:count]
        self.cols = self._cols[:count]
        self.d = self._d[:count]
        self.g_buf, self.s_buf = self._g[:count], self._s[:count]

    def form(self, weights: WeightSet, g: np.ndarray, silent: Iterable[int] = ()) -> None:
        """C^T = B^T (g s) of weight set ``weights`` for every packed mode (``g``: weights of every slot,
        shape (slots, modes)), with the columns of the ``silent`` slots zero."""
        np.take(g.reshape(-1), self.cols, out=self.g_buf, mode="clip")
        np.take(self.pool.s.reshape(-1), self.cols, out=self.s_buf, mode="clip")
        np.multiply(self.g_buf, self.s_buf, out=self.d, casting="same_kind")
        if self.holes:
            self.d *= self._keep[: self.columns]
        start, live = self.start, self.live
        for v in silent:
            if v < self.n:
                self.d[start[v]: start[v] + live[v]] = 0.0
        np.multiply(self.bt, self.d, out=self.ct[weights.value])

    def refresh(self, v: int) -> None:
        """Slot v's coefficients (weight set NOW) afresh from its weights and amplitudes now."""
        k = self.live[v]
        if k:
            lo = self.start[v]
            hi = lo + k
            np.multiply(self.pool.gf[v, :k], self.pool.s[v, :k], out=self.d[lo:hi], casting="same_kind")
            np.multiply(self.bt[:, lo:hi], self.d[lo:hi], out=self.ct[0][:, lo:hi])

    def silence(self, v: int) -> None:
        """Slot v out of this block's product (it is rendered on the exact path)."""
        if v < self.n:
            self.ct[0][:, self.start[v]: self.start[v] + self.live[v]] = 0.0

    def product(self, ramping: bool) -> None:
        """The block for weight set NOW (and TARGET too when ``ramping``) into ``samples``."""
        sets = 2 if ramping else 1
        if self.columns:
            np.matmul(self.lhs[sets - 1], self.a, out=self.y[: sets * self.n2])
        else:
            self.y[: sets * self.n2] = 0.0

    def advance(self, ramping: bool) -> None:
        """The next block's coefficients: this block's (the ramp target's when ``ramping``) times p^N."""
        np.multiply(self.ct[1] if ramping else self.ct[0], self.pb, out=self.ct[0])
