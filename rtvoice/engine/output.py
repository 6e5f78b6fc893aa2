"""The output stage's parts: the limiter, the DC blocker's and coil filter's coefficients, a sample filter.

The engine applies its linear output filter to the modes (:mod:`rtvoice.engine.modal_filter`)
and then the gain and the limiter here, block by block with carried state, so the
same code serves real-time and offline rendering. The limiter holds the sample peak at
-1 dBFS and the true peak (between samples, ITU-R BS.1770-4 Annex 2) at -1 dBTP, looking
1.5 ms ahead: the engine's output is that much late.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.ndimage
import scipy.signal

from rtvoice.engine.notes import resonance_of
from rtvoice.engine.settings import Settings
from rtvoice.physics.electronics import lowpass_biquad

OUTPUT_SCALE = 0.25  # one full-velocity note peaks near -12 dBFS at 0 dB gain
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


#: The true-peak interpolator of ITU-R BS.1770-4 (2015), Annex 2: 4x oversampling by a 48-tap
#: polyphase FIR, listed there as four phases of 12 taps. Row p gives the values a quarter-sample
#: grid apart: y[4m + p] = sum_k TRUE_PEAK_PHASES[p, k] x[m - k].
TRUE_PEAK_PHASES = np.array([
    [0.0017089843750, 0.0109863281250, -0.0196533203125, 0.0332031250000, -0.0594482421875, 0.1373291015625,
     0.9721679687500, -0.1022949218750, 0.0476074218750, -0.0266113281250, 0.0148925781250, -0.0083007812500],
    [-0.0291748046875, 0.0292968750000, -0.0517578125000, 0.0891113281250, -0.1665039062500, 0.4650878906250,
     0.7797851562500, -0.2003173828125, 0.1015625000000, -0.0582275390625, 0.0330810546875, -0.0189208984375],
    [-0.0189208984375, 0.0330810546875, -0.0582275390625, 0.1015625000000, -0.2003173828125, 0.7797851562500,
     0.4650878906250, -0.1665039062500, 0.0891113281250, -0.0517578125000, 0.0292968750000, -0.0291748046875],
    [-0.0083007812500, 0.0148925781250, -0.0266113281250, 0.0476074218750, -0.1022949218750, 0.9721679687500,
     0.1373291015625, -0.0594482421875, 0.0332031250000, -0.0196533203125, 0.0109863281250, 0.0017089843750],
])
OVERSAMPLE = 8  # the finer grid of the limiter's own interpolator
SPAN = 21  # samples one row of the limiter's interpolators reads


def peak_interpolator() -> np.ndarray:
    """(SPAN x 13) matrix: a row of SPAN consecutive samples, oldest first, times it gives values
    between the row's middle samples: the four of BS.1770-4 Annex 2 (4x, 12 taps), eight of a
    finer 8x interpolator, and the middle sample itself.

    The 8x interpolator is a Kaiser-windowed sinc (scipy.signal.firwin, 161 taps, beta 5, cut-off
    at the input's Nyquist frequency): the recipe of scipy.signal.resample_poly's default filter,
    flat to 0.4 fs. Its denser grid and longer span read the peaks of bright sounds (a hard strike,
    the coil filter bypassed) up to about 0.15 dB above the standard's short filter, which sees
    the grid of 4x and filters more above 0.4 fs; the limiter holds both under the ceiling.
    """
    m = np.zeros((SPAN, 4 + OVERSAMPLE + 1))
    centre = SPAN // 2  # row index of the middle sample (10)
    bs = TRUE_PEAK_PHASES[:, ::-1].T  # oldest sample first
    first = centre - TRUE_PEAK_PHASES.shape[1] // 2 + 1  # the 12 taps' interval straddles the centre
    m[first : first + bs.shape[0], :4] = bs
    fine = scipy.signal.firwin(OVERSAMPLE * (SPAN - 1) + 1, 1.0 / OVERSAMPLE, window=("kaiser", 5.0)) * OVERSAMPLE
    for p in range(OVERSAMPLE):
        taps = fine[p::OVERSAMPLE][::-1]  # y[8m + p] = sum_k fine[8k + p] x[m - k]: oldest first
        m[SPAN - taps.size :, 4 + p] = taps
    m[centre, -1] = 1.0
    return m


#: |interpolated value| <= (sum_k |h[k]|) max |x| over the samples it reads (triangle inequality);
#: the largest sum over the columns of :func:`peak_interpolator` is 2.24 (+7.0 dB, the finer
#: filter's middle phase). A stretch whose samples all lie below the target by more than that
#: cannot hold an interpolated value above it: the limiter skips the interpolation there. (No
#: bound of this kind holds for the ideal sinc interpolator, whose absolute sum diverges; this is
#: the bound of what the limiter measures.)
TRUE_PEAK_GAIN_BOUND = float(np.abs(peak_interpolator()).sum(axis=0).max())

CEILING_DBTP = -1.0  # the true-peak ceiling (EBU R128 / Tech 3341's maximum for programme); the same level
#: The limiter aims this far under the ceiling, for what its estimate cannot see. Between the 8x
#: grid's points a peak can rise higher still (scipy.signal.resample_poly(x, 16, 1) read up to
#: 0.04 dB above the 8x grid on the brightest sounds tried), and where the gain moves inside the
#: span of a value that is not the loudest nearby, the interpolated output is not exactly gain
#: times value (up to 0.002 dB seen). 0.05 dB covers both, and nobody hears it.
TRUE_PEAK_MARGIN_DB = 0.05
TRUE_PEAK_TARGET: float = 10.0 ** ((min(CEILING_DBFS, CEILING_DBTP) - TRUE_PEAK_MARGIN_DB) / 20.0)
LOOKAHEAD_S = 1.5e-3  # the limiter's look-ahead: the engine's output is this much later
RELEASE_S = 0.15


class Limiter:
    """Look-ahead limiter: every sample and every interpolated value between samples at or under the ceiling.

    The output is the input delayed by :attr:`latency_frames` (``LOOKAHEAD_S``, 1.5 ms: 72
    frames at 48 kHz; the engine's only added latency) and multiplied by a gain worked out
    from what lies ahead:

    1. each new sample gets a level: the largest magnitude among the values that
       :func:`peak_interpolator` places near the middle of the SPAN samples ending at it
       (BS.1770-4's 4x and a finer 8x) and that middle sample itself;
    2. a level asks for gain <= target / level on all SPAN samples its values were made from;
       the attack has to be over before the first of them, so the reduction a sample needs is
       set by the largest level over the next ``latency_frames + 1`` (a sliding maximum);
    3. that reduction is held and released exponentially (``RELEASE_S``) by a running maximum,
       and smoothed by a moving average over ``attack_frames`` (``latency_frames - SPAN + 2``):
       the gain falls in a straight line and reaches its value as the first sample a peak's
       interpolation reads comes out. Every reduction in the mean covers the sample's own need,
       so the mean does too: the gain is never above what a sample or an interpolated value
       needs, and around the loudest peak it is constant over the samples the peak's
       interpolation reads, so the interpolated output there is the gain times the interpolated
       input, exactly.

    The target is ``TRUE_PEAK_MARGIN_DB`` under the ceiling (see there). A clip at the sample
    ceiling stays as the last safety (``clipped`` counts its samples; it is not expected to act).
    A block holding NaN, inf or a magnitude above ``FAULT`` becomes silence before it enters the
    delay line. Stretches that need no reduction come out exactly delayed (bit for bit); where
    every sample lies more than :data:`TRUE_PEAK_GAIN_BOUND` under the target, the interpolation
    is skipped. The output does not depend on the block size, up to rounding and the release's
    last millionth (a reduction under ``RECOVERED`` is dropped at a block's end).

    ``gain_reduction_db`` reports the deepest reduction of the last block and ``peak`` its
    largest output magnitude (where no gain was applied, a bound: the largest input magnitude
    of the blocks the delayed output spans, at most the ceiling). Every buffer is allocated
    here, for blocks of up to ``block_frames``.
    """

    RECOVERED = 1e-6  # a reduction this small is none (-0.00001 dB)
    #: A magnitude above this is a numeric fault, not sound (and would overflow the single-precision levels).
    FAULT = 1e30

    def __init__(self, sample_rate_hz: float, block_frames: int, release_s: float = RELEASE_S,
                 lookahead_s: float = LOOKAHEAD_S):
        n = self.block = int(block_frames)
        # At least twice the span of one interpolated value, so the attack has frames to act on.
        look = self.latency_frames = max(2 * SPAN, round(lookahead_s * sample_rate_hz))
        self.latency_s = look / sample_rate_hz
        self.attack_frames = look - (SPAN - 2)
        self.target = TRUE_PEAK_TARGET
        self.quiet_level = TRUE_PEAK_TARGET / TRUE_PEAK_GAIN_BOUND
        c = self.release_coef = math.exp(-1.0 / (release_s * sample_rate_hz))
        idx = np.arange(n, dtype=float)
        self._rise, self._fall = c**-idx, c**idx  # for the running maximum of a decaying hold
        # Levels in single precision (relative error ~1e-7, far inside the margin), new samples
        # along the rows, so each numpy call runs over long contiguous rows.
        interp = peak_interpolator()
        self._interp = np.ascontiguousarray(interp.T, dtype=np.float32)
        self._x = np.zeros(look + n)  # delay line: the last `look` inputs, then the new block
        base = self._x[look - (SPAN - 1) :]  # column r of this view: the SPAN samples ending at new sample r
        self._span_view = np.lib.stride_tricks.as_strided(base, (SPAN, n), (base.strides[0],) * 2, writeable=False)
        self._spans = np.empty((SPAN, n), dtype=np.float32)
        self._values = np.empty((interp.shape[1], n), dtype=np.float32)
        self._new_levels = np.empty(n, dtype=np.float32)  # (a reduce into double precision would allocate)
        self._level = np.zeros(look + n)  # levels: the last `look`, then the new block's
        self._ahead = np.empty(look + n)  # the largest level over each sample's look-ahead (the first n count)
        self._reduction = np.zeros(self.attack_frames - 1 + n)  # the moving average's history, then the new
        self._sums = np.zeros(self.attack_frames + n)
        self._gain = np.empty(n)
        self._work = np.empty(n)
        self._in_peaks = [0.0] * (-(-look // n) + 1)  # input peaks of the blocks the output spans
        self.clipped = 0
        self.peak = 0.0
        self.reset()

    def reset(self) -> None:
        """Silence in the delay line and no reduction."""
        self._x[:] = 0.0
        self._reduction[:] = 0.0
        self._held = 0.0  # the reduction at the last output sample, before smoothing
        self._quiet_inputs = SPAN  # trailing input samples known to be at most quiet_level
        self._quiet_reductions = self.attack_frames  # trailing zero reductions in the history
        self._levels_quiet = True  # the last `look + 1` levels are all at most the target
        self._levels_stale = True  # the level history was not kept (every level in it was quiet)
        self._in_peaks[:] = [0.0] * len(self._in_peaks)
        self._blocks = 0
        self.gain_reduction_db = 0.0

    def process(self, x: np.ndarray) -> None:
        """Limit ``x`` in place (what comes out is ``latency_frames`` older)."""
        self.apply(x, *self.measure(x))

    def measure(self, x: np.ndarray) -> tuple[float, int]:
        """(peak magnitude, its index) of ``x``; the peak is NaN or inf when ``x`` holds one."""
        work = self._work[: x.size]
        np.abs(x, out=work)
        peak_at = int(work.argmax())  # argmax stops at the first NaN
        return float(work[peak_at]), peak_at

    def apply(self, x: np.ndarray, peak: float, peak_at: int = 0) -> None:
        """Limit ``x`` in place, given :meth:`measure`'s peak for it (``peak_at`` is not needed)."""
        n = x.size
        look = self.latency_frames
        buf = self._x
        peaks = self._in_peaks
        if peak <= self.quiet_level and self._idle and self._quiet_inputs >= SPAN - 1:
            # The usual case: no level can be above the target and no reduction is under way.
            peaks[self._blocks % len(peaks)] = peak
            self._blocks += 1
            buf[look : look + n] = x
            x[:] = buf[:n]
            buf[:look] = buf[n : n + look]
            self._levels_stale = True
            self._quiet_inputs += n
            self._quiet_reductions += n
            self.gain_reduction_db = 0.0
            self.peak = min(max(peaks), CEILING)
            return
        if not peak <= self.FAULT:  # never let a NaN, inf or overflow into the delay line
            x[:] = 0.0
            peak = 0.0
        peaks[self._blocks % len(peaks)] = peak
        self._blocks += 1
        buf[look : look + n] = x
        self._quiet_inputs = self._quiet_inputs + n if peak <= self.quiet_level else 0
        if not self._levels(n) and self._idle:  # levels computed, none above the target
            x[:] = buf[:n]
            buf[:look] = buf[n : n + look]
            self._levels_stale = True
            self._quiet_reductions += n
            self.gain_reduction_db = 0.0
            self.peak = min(max(peaks), CEILING)
            return
        deepest = self._gain_curve(n)
        np.multiply(buf[:n], self._gain[:n], out=x)
        buf[:look] = buf[n : n + look]
        self.gain_reduction_db = -20.0 * math.log10(max(1.0 - deepest, 1e-12))
        peak_after = max(float(np.maximum.reduce(x)), -float(np.minimum.reduce(x)))
        if peak_after > CEILING:  # not expected: the gain already holds every sample under the target
            work = self._work[:n]
            np.abs(x, out=work)
            self.clipped += int(np.count_nonzero(work > CEILING))
            np.clip(x, -CEILING, CEILING, out=x)
        self.peak = min(peak_after, CEILING)

    @property
    def _idle(self) -> bool:
        """No level ahead above the target and no reduction held or in the moving average."""
        return self._held == 0.0 and self._levels_quiet and self._quiet_reductions >= self.attack_frames - 1

    def _levels(self, n: int) -> bool:
        """The levels of the ``n`` new samples into ``_level``; whether any is above the target."""
        look = self.latency_frames
        level = self._level
        if self._levels_stale:  # not kept while every level was quiet: zeros stand for them
            level[:look] = 0.0
            self._levels_stale = False
        spans = self._spans[:, :n]
        np.copyto(spans, self._span_view[:, :n])
        values = self._values[:, :n]
        np.matmul(self._interp, spans, out=values)
        np.abs(values, out=values)
        new = self._new_levels[:n]
        np.maximum.reduce(values, axis=0, out=new)
        level[look : look + n] = new
        return float(np.maximum.reduce(new)) > self.target

    def _gain_curve(self, n: int) -> float:
        """The gain of the next ``n`` output samples into ``_gain``; returns the deepest reduction."""
        look = self.latency_frames
        level = self._level[: look + n]
        # Sliding maximum over the look + 1 levels from each output sample on: one pass (the running
        # maximum of scipy.ndimage, O(n)); the window starts at the sample (origin -(size // 2)).
        ahead = self._ahead[: look + n]
        scipy.ndimage.maximum_filter1d(level, look + 1, output=ahead, mode="constant", cval=0.0,
                                       origin=-((look + 1) // 2))
        need = ahead[:n]
        # The reduction needed, 1 - target / max(level, target): exactly 0 where within the target.
        np.maximum(need, self.target, out=need)
        np.divide(self.target, need, out=need)
        np.subtract(1.0, need, out=need)
        self._levels_quiet = bool(need[n - 1] == 0.0)  # its window was the last look + 1 levels
        # Held and released: r[j] = max(need[j], c r[j-1]) = c^j max_{k<=j} c^-k need[k], where
        # r[-1] is the reduction held at the end of the last block.
        attack = self.attack_frames
        red = self._reduction
        new = red[attack - 1 : attack - 1 + n]
        np.multiply(need, self._rise[:n], out=new)
        carried = self._held * self.release_coef
        if carried > new[0]:
            new[0] = carried
        np.maximum.accumulate(new, out=new)
        new *= self._fall[:n]
        last = float(new[-1])
        self._held = last if last >= self.RECOVERED else 0.0
        # A positive reduction stays positive through the block (c r > 0): a last 0 means all were 0.
        self._quiet_reductions = self._quiet_reductions + n if last == 0.0 else 0
        # Moving average over `attack` reductions, as differences of a running sum: the straight-line
        # attack. Exactly 0 where all are 0, so a stretch without reduction keeps gain 1 exactly.
        sums = self._sums
        np.add.accumulate(red[: attack - 1 + n], out=sums[1 : attack + n])
        gain = self._gain[:n]
        np.subtract(sums[attack : attack + n], sums[:n], out=gain)
        deepest = float(np.maximum.reduce(gain)) / attack
        np.multiply(gain, -1.0 / attack, out=gain)
        gain += 1.0
        red[: attack - 1] = red[n : n + attack - 1]
        level[:look] = level[n : n + look]
        return deepest


def output_stage(settings: Settings, sample_rate_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of the whole linear output stage, as for scipy.signal.lfilter: output scale, coil and cable
    low-pass (when not bypassed) and DC blocker, before the output gain and the limiter."""
    f_r, q = resonance_of(settings)
    b, a = dc_blocker_coefficients(sample_rate_hz)
    b = b * OUTPUT_SCALE
    if f_r > 0:
        coil_b, coil_a = lowpass_biquad(f_r, q, sample_rate_hz)
        b, a = np.convolve(coil_b, b), np.convolve(coil_a, a)
    return b, a
