"""A linear output filter (electronics, DC blocker, output scale) applied to modes, not samples.

The engine's signal is a sum of damped exponential modes, u[n] = Re sum_m c_m p_m^n.
A linear time-invariant filter H(z) = B(z) / A(z) turns each such mode into
H(p_m) c_m p_m^n once it is under way (its steady response), so the engine folds
H(p_m) into the mode weights (:meth:`ModalFilter.gain`) and never filters a block.

What the steady response leaves out is the filter's free response. Written in
state space (controllable canonical form: x[n+1] = F x[n] + e1 u[n],
y[n] = C x[n] + D u[n], with x = the last ``order`` values of the direct form II
signal), a mode c p^n holds the state at (p I - F)^{-1} e1 c p^n
(:meth:`ModalFilter.steady_state`). When a mode starts, stops or changes its p at
sample k, the true state carries on while the steady one jumps; the difference
is a free state dx that decays as F^j dx and is heard as C F^j dx
(:meth:`ModalFilter.kick`). Free response plus folded modes equals the filter run
on the samples exactly (tests/test_modal_filter.py checks it against
scipy.signal.lfilter); only a weight ramp (a moving pickup) is folded per block
rather than per sample, an error of the filter's group delay over the block length
times the ramp's step.
"""

from __future__ import annotations

import math

import numpy as np

FREE_FLOOR = 1e-10  # a free response whose state bound falls below this (-200 dB) is over


def _padded(b: np.ndarray, a: np.ndarray, order: int) -> tuple[np.ndarray, np.ndarray]:
    b, a = np.asarray(b, float), np.asarray(a, float)
    if a[0] == 0:
        raise ValueError("a[0] must not be zero")
    if max(len(a), len(b)) - 1 > order:
        raise ValueError(f"filter order above {order}")
    bb, aa = np.zeros(order + 1), np.zeros(order + 1)
    bb[: len(b)], aa[: len(a)] = b / a[0], a / a[0]
    return bb, aa


class ModalFilter:
    """H(z) = B(z) / A(z) of at most ``order`` (b, a as for scipy.signal.lfilter), for blocks of ``block_frames``.

    ``x`` is the free state at the start of the next block (real: the filter is
    real, so the free part of Re(...) is the real part of the free state).
    """

    def __init__(self, b: np.ndarray, a: np.ndarray, block_frames: int, order: int = 3) -> None:
        self.b, self.a = _padded(b, a, order)
        self.order, self.block = order, int(block_frames)
        self.d = self.b[0]
        self.c = self.b[1:] - self.b[0] * self.a[1:]  # y = C x + D u in the canonical form
        f = np.zeros((order, order))
        f[0] = -self.a[1:]
        f[1:, :-1] = np.eye(order - 1)
        self.f = f
        # powers[j] = F^j for j = 0..N, heard[j] = C F^j: the free response's tables.
        powers = np.empty((self.block + 1, order, order))
        powers[0] = np.eye(order)
        for j in range(self.block):
            powers[j + 1] = f @ powers[j]
        self._powers = powers
        self._heard = powers[: self.block].transpose(0, 2, 1) @ self.c  # (N, order)
        self._c_bound = float(np.abs(self.c).sum())
        self._advance = np.concatenate([self._heard, powers[self.block]])  # (N + order, order)
        self._free_and_next = np.zeros(self.block + order)  # work buffers: nothing is allocated per block
        self._free = self._free_and_next[: self.block]
        self._x_next = self._free_and_next[self.block:]
        self.x = np.zeros(order)
        self._x_end = np.zeros(order)  # what this block's kicks leave in the state at its end
        self._kicked = False
        self._ringing = False  # x is not zero (a flag: numpy's reductions cost microseconds on 3 values)

    # -- steady response ----------------------------------------------------------
    def _denominator(self, p: np.ndarray) -> np.ndarray:
        """p^order A(1/p) = p^n + a1 p^(n-1) + ... + an, by Horner's rule."""
        den: np.ndarray = p + self.a[1]
        for coef in self.a[2:]:
            den = den * p + coef
        return den

    def resolvent(self, p: np.ndarray) -> np.ndarray:
        """(p I - F)^{-1} e1 = [p^(n-1), ..., p, 1] / (p^n A(1/p)) for each p: shape p.shape + (order,).

        The state a mode p^n of unit amplitude holds at n = 0 (the engine keeps it per mode).
        """
        r = np.empty(p.shape + (self.order,), complex)
        r[..., -1] = 1.0 / self._denominator(p)
        for i in range(self.order - 2, -1, -1):
            np.multiply(r[..., i + 1], p, out=r[..., i])
        return r

    def gain_from(self, r: np.ndarray) -> np.ndarray:
        """H(p) = C (p I - F)^{-1} e1 + D from :meth:`resolvent`'s ``r``."""
        h: np.ndarray = r @ self.c + self.d
        return h

    def gain(self, p: np.ndarray) -> np.ndarray:
        """H(p): the complex factor the filter applies to a mode p^n once it is under way."""
        return self.gain_from(self.resolvent(p))

    @staticmethod
    def steady_state(r: np.ndarray, c: np.ndarray) -> np.ndarray:
        """Re of the state modes of amplitude ``c`` (resolvents ``r``) hold now, summed over modes (the last axis of c).

        Shape c.shape[:-1] + (order,).
        """
        x: np.ndarray = (c[..., None, :] @ r)[..., 0, :].real  # a matmul: a third of einsum's overhead on a few rows
        return x

    # -- free response ------------------------------------------------------------
    def kick(self, dx: np.ndarray, at: int, out: np.ndarray) -> None:
        """Add the free response of a state jump ``dx`` at sample ``at`` of this block to ``out``."""
        n = self.block - at
        free = self._free[:n]
        np.matmul(self._heard[:n], dx, out=free)
        out[at:] += free
        self._x_end += self._powers[n] @ dx
        self._kicked = True

    def kicks(self, dx: np.ndarray, at: np.ndarray, out: np.ndarray) -> None:
        """:meth:`kick` for many jumps at once: ``dx`` of shape (count, order), ``at`` their samples.

        The free responses sum as one convolution per state component of the jumps
        laid out on their samples with the filter's response: a few calls, whatever the count.
        """
        samples = at.tolist()
        if len(samples) > 1 and samples.count(samples[0]) == len(samples):  # one sample (a re-pluck, a chord)
            self.kick(dx.sum(axis=0), samples[0], out)  # the filter is linear: one kick of the summed jump
            return
        if len(at) <= 4:
            for i in range(len(at)):
                self.kick(dx[i], int(at[i]), out)
            return
        for k in range(self.order):
            impulses = np.bincount(at, weights=dx[:, k], minlength=self.block)
            out += np.convolve(impulses, self._heard[:, k])[: self.block]
        self._x_end += np.einsum("kij,kj->i", self._powers[self.block - np.asarray(at)], dx)
        self._kicked = True

    def jump(self, dx: np.ndarray) -> None:
        """A state jump at the start of the next block (a change between blocks)."""
        self.x += dx
        self._ringing = True

    def render_free(self, out: np.ndarray) -> None:
        """Add the free response of the carried state to the block ``out`` and advance the state by a block."""
        if not self._ringing and not self._kicked:
            return
        x = self.x
        if self._ringing:  # one product gives the block's free response and the state after it
            np.matmul(self._advance, x, out=self._free_and_next)
            out += self._free
            x[:] = self._x_next
        if self._kicked:
            x += self._x_end
            self._x_end[:] = 0.0
            self._kicked = False
        bound = max(map(abs, x.tolist())) * self._c_bound
        self._ringing = FREE_FLOOR <= bound < math.inf  # faded out, or not finite: over
        if not self._ringing:
            x[:] = 0.0

    def take_free_response(self, old: ModalFilter) -> None:
        """Carry on the free response of ``old`` (a filter this one replaces) as well as this one's state can.

        The new free state is the one whose first ``order`` output samples match the
        old one's (least squares, so an unobservable state is no obstacle): the free
        response continues without a step where the coefficients change.
        """
        if not old._ringing:
            return
        seen_old, seen_new = old._observed(), self._observed()
        self.x[:] = np.linalg.lstsq(seen_new, seen_old @ old.x, rcond=None)[0]
        self._ringing = True

    def _observed(self) -> np.ndarray:
        """[C; C F; ...; C F^(order-1)]: the first ``order`` free output samples per unit of state."""
        return self._heard[: self.order] if self.block >= self.order else np.array(
            [self.c @ np.linalg.matrix_power(self.f, j) for j in range(self.order)])

    def reset(self) -> None:
        self.x[:] = 0.0
        self._x_end[:] = 0.0
        self._kicked = False
        self._ringing = False
