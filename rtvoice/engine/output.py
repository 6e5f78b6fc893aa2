"""The output stage's parts: the limiter, the DC blocker's and coil filter's coefficients, a sample filter.

The engine applies its linear output filter to the modes (:mod:`rtvoice.engine.modal_filter`)
and then the gain and the limiter here, block by block with carried state, so the
same code serves real-time and offline rendering.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.signal

from rtvoice.physics.electronics import lowpass_biquad

CEILING_DBFS = -1.0
CEILING = 10.0 ** (CEILING_DBFS / 20.0)  # 0.891251 linear


class BlockFilter:
    """A linear filter (b, a) applied block by block with carried state (scipy.signal.lfilter's ``zi``).

    The engine folds its output filter into the modes instead
    (:mod:`rtvoice.engine.modal_filter`); this one serves the survey's model (its
    coefficients) and the benchmark's baselines, which filter samples.
    """

    def __init__(self, b: np.ndarray, a: np.ndarray):
        self.b, self.a = np.asarray(b, float), np.asarray(a, float)
        self.zi = np.zeros(max(len(self.a), len(self.b)) - 1)

    def process(self, x: np.ndarray) -> None:
        """Filter ``x`` in place."""
        x[:], self.zi = scipy.signal.lfilter(self.b, self.a, x, zi=self.zi)
        if not all(map(math.isfinite, self.zi)):  # a few values: cheaper in Python than a ufunc
            self.zi[:] = 0.0


def electronics_filter(resonance_hz: float, q: float, sample_rate_hz: float) -> BlockFilter | None:
    """The coil-and-cable low-pass, or None when bypassed (resonance 0)."""
    if resonance_hz <= 0:
        return None
    return BlockFilter(*lowpass_biquad(resonance_hz, q, sample_rate_hz))


def dc_blocker_coefficients(sample_rate_hz: float, corner_hz: float = 5.0) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of y[n] = x[n] - x[n-1] + R y[n-1], R = exp(-2 pi f_c / fs) (Smith, Introduction to Digital Filters)."""
    r = math.exp(-2 * math.pi * corner_hz / sample_rate_hz)
    return np.array([1.0, -1.0]), np.array([1.0, -r])


def dc_blocker(sample_rate_hz: float, corner_hz: float = 5.0) -> BlockFilter:
    """The DC blocker of :func:`dc_blocker_coefficients` as a block filter."""
    return BlockFilter(*dc_blocker_coefficients(sample_rate_hz, corner_hz))


class Limiter:
    """Peak limiter with a hard ceiling, no look-ahead (so no added latency).

    The gain falls to what the block's loudest sample needs, reaching it at that
    sample, and recovers with a release time constant. Anything still above the
    ceiling (a transient inside the attack ramp) is clipped, so no sample ever
    exceeds :data:`CEILING`. ``gain_reduction_db`` reports the deepest reduction of
    the last block, ``peak`` its largest output magnitude; ``clipped`` counts
    samples that needed the safety clip.
    """

    RECOVERED = 1.0 - 1e-6  # a gain this close to 1 is 1 (-0.00001 dB)

    def __init__(self, sample_rate_hz: float, block_frames: int, release_s: float = 0.15):
        self.gain = 1.0
        self.block = block_frames
        self.release_coef = math.exp(-1.0 / (release_s * sample_rate_hz))
        self._ramp = np.empty(block_frames)
        self._work = np.empty(block_frames)
        self._idx = np.arange(1, block_frames + 1, dtype=float)
        self._release_curve = self.release_coef ** self._idx
        self.gain_reduction_db = 0.0
        self.clipped = 0
        self.peak = 0.0

    def process(self, x: np.ndarray) -> None:
        """Limit ``x`` in place."""
        self.apply(x, *self.measure(x))

    def measure(self, x: np.ndarray) -> tuple[float, int]:
        """(peak magnitude, its index) of ``x``; the peak is NaN or inf when ``x`` holds one."""
        work = self._work[: x.size]
        np.abs(x, out=work)
        peak_at = int(work.argmax())  # argmax stops at the first NaN
        return float(work[peak_at]), peak_at

    def apply(self, x: np.ndarray, peak: float, peak_at: int) -> None:
        """Limit ``x`` in place, given :meth:`measure`'s result for it."""
        n = x.size
        ramp, work = self._ramp[:n], self._work[:n]
        g0 = self.gain
        if g0 == 1.0 and peak <= CEILING:  # the usual case: nothing to do
            self.gain_reduction_db = 0.0
            self.peak = peak
            return
        # Release: the gain climbs back towards 1 (rising, so its least value is the first).
        curve = self._release_curve
        if peak * (1.0 + (g0 - 1.0) * curve[peak_at]) > CEILING:
            target = CEILING / peak
            # Attack: a straight line from g0 to the target at the peak, then held (the release
            # curve is above the target from the peak on, since it rises and was above it there).
            steps = peak_at + 1
            np.multiply(self._idx[:steps], (target - g0) / steps, out=ramp[:steps])
            ramp[:steps] += g0
            ramp[steps:] = target
            least = min(float(ramp[0]), target)  # the line's first step, or the held target
        else:
            np.multiply(curve[:n], g0 - 1.0, out=ramp)
            ramp += 1.0
            least = float(ramp[0])
        x *= ramp
        self.gain = float(ramp[-1])
        if self.gain > self.RECOVERED:
            self.gain = 1.0
        self.gain_reduction_db = -20.0 * math.log10(max(least, 1e-12))
        peak_after = max(float(x.max()), -float(x.min()))
        if peak_after > CEILING:  # a transient inside the attack line: the safety clip
            np.abs(x, out=work)
            self.clipped += int(np.count_nonzero(work > CEILING))
            np.clip(x, -CEILING, CEILING, out=x)
        self.peak = min(peak_after, CEILING)

    def reset(self) -> None:
        self.gain = 1.0
        self.gain_reduction_db = 0.0
