"""A true-peak meter from ITU-R BS.1770-4 (2015), Annex 2, written independently of the engine.

The Annex measures the peak between samples by 4x oversampling: insert three zeros after
every sample, low-pass with the standard's 48-tap FIR (listed there as four phases of 12 taps,
copied below), take the largest magnitude, and read it in dBTP (dB true peak, re full scale).
The Annex's optional 12.04 dB attenuation before the filter (headroom for fixed-point meters)
changes nothing in floating point and is left out.

``reference_true_peak`` is the cross-check: a general-purpose polyphase resampler
(scipy.signal.resample_poly, a 20-sample Kaiser-windowed sinc) in place of the standard's
short filter, at any oversampling factor.
"""

from __future__ import annotations

import numpy as np
import scipy.signal

#: ITU-R BS.1770-4 Annex 2, the interpolating filter's four phases (12 taps each): the 4x signal is
#: y[4m + p] = sum_k BS1770_PHASES[p][k] x[m - k].
BS1770_PHASES = np.array([
    [0.0017089843750, 0.0109863281250, -0.0196533203125, 0.0332031250000, -0.0594482421875, 0.1373291015625,
     0.9721679687500, -0.1022949218750, 0.0476074218750, -0.0266113281250, 0.0148925781250, -0.0083007812500],
    [-0.0291748046875, 0.0292968750000, -0.0517578125000, 0.0891113281250, -0.1665039062500, 0.4650878906250,
     0.7797851562500, -0.2003173828125, 0.1015625000000, -0.0582275390625, 0.0330810546875, -0.0189208984375],
    [-0.0189208984375, 0.0330810546875, -0.0582275390625, 0.1015625000000, -0.2003173828125, 0.7797851562500,
     0.4650878906250, -0.1665039062500, 0.0891113281250, -0.0517578125000, 0.0292968750000, -0.0291748046875],
    [-0.0083007812500, 0.0148925781250, -0.0266113281250, 0.0476074218750, -0.1022949218750, 0.9721679687500,
     0.1373291015625, -0.0594482421875, 0.0332031250000, -0.0196533203125, 0.0109863281250, 0.0017089843750],
])
#: The same filter as one 48-tap FIR at the 4x rate: h[4k + p] = phase p, tap k.
BS1770_FIR = BS1770_PHASES.T.reshape(-1)


def oversampled(x: np.ndarray) -> np.ndarray:
    """The Annex's 4x signal, only where each value reads 12 samples of ``x``.

    ``x`` is taken as a stretch of a longer stream: values that would read past either end
    (where a meter would see a step to silence that is not in the stream) are left out.
    """
    phases = [np.convolve(x, taps, mode="valid") for taps in BS1770_PHASES]
    return np.stack(phases, axis=1).reshape(-1)


def true_peak(x: np.ndarray) -> float:
    """The true peak of ``x`` per BS.1770-4 Annex 2 (linear, full scale = 1)."""
    return float(np.max(np.abs(oversampled(x))))


def true_peak_dbtp(x: np.ndarray) -> float:
    return float(20.0 * np.log10(true_peak(x)))


def reference_true_peak(x: np.ndarray, factor: int = 4, edge: int = 32) -> float:
    """The peak of scipy.signal.resample_poly(x, factor, 1), the ``edge`` samples at each end left out
    (the resampler pads ``x`` with zeros: a step to silence that is not in the stream)."""
    y = scipy.signal.resample_poly(x, factor, 1)
    return float(np.max(np.abs(y[factor * edge : -factor * edge])))


def dbtp(linear: float) -> float:
    return float(20.0 * np.log10(linear))
