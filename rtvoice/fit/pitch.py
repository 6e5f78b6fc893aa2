"""Where a take's note starts, and roughly what its pitch is.

The onset is where the signal first rises clearly out of what precedes it: the first sample above
both 1 % of the take's peak and three times the noise's 1 ms peaks (the quietest tenth of the
take's 1 ms frames), searched from 20 ms before the 1 ms peak envelope first reaches a tenth of
its maximum and 18 dB over the noise. The rough f0 comes from the
cumulative-mean-normalised difference function of de Cheveigné & Kawahara, "YIN, a fundamental
frequency estimator for speech and music", JASA 111(4), 1917 (2002), eqs. (6)-(8): its first dip
under a threshold resists the octave-too-low errors of a plain autocorrelation.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.fft

ENVELOPE_FRAME_S = 0.001
RISE_FRACTION = 0.1  # the 1 ms envelope's first frame at a tenth of its peak is inside the attack
ONSET_FRACTION = 0.01  # a sample above 1 % of the peak has left the silence before the note
NOISE_PEAK_FACTOR = 3.0
NOISE_PERCENTILE = 10.0
RISE_OVER_NOISE = 8.0  # the attack stands 18 dB over the noise's peaks
LOOK_BACK_S = 0.02
LOWEST_F0_HZ = 25.0  # below a five-string bass's low B (30.9 Hz; common practice)
HIGHEST_F0_HZ = 2000.0  # above the top fret of a guitar's first string (E6 1318.5 Hz at fret 24)
YIN_THRESHOLD = 0.15  # de Cheveigné & Kawahara use 0.1-0.15 for the absolute threshold (step 4)
YIN_RELAXED_MARGIN = 0.1  # without a dip under the threshold, dips this close to the deepest count
YIN_SKIP_S = 0.01  # the pick's own click at the very start says little about the period
YIN_WINDOW_S = 0.08


def find_onset(x: np.ndarray, sample_rate_hz: float) -> int:
    """Index of the first sample of the note in ``x`` (which must hold a non-zero sample)."""
    frame = max(1, int(round(ENVELOPE_FRAME_S * sample_rate_hz)))
    n_frames = x.size // frame
    if n_frames < 2:
        return 0
    env = np.abs(x[: n_frames * frame]).reshape(n_frames, frame).max(axis=1)
    peak = float(env.max())
    # The noise's own 1 ms peaks: the quietest tenth of the frames is noise in any take that rings
    # down or has silence before the note.
    noise_peak = float(np.percentile(env, NOISE_PERCENTILE))
    rise_level = max(RISE_FRACTION * peak, RISE_OVER_NOISE * noise_peak)
    rising = np.flatnonzero(env >= rise_level)
    rise = int(rising[0]) if rising.size else int(np.argmax(env))
    threshold = max(ONSET_FRACTION * peak, NOISE_PEAK_FACTOR * noise_peak)
    look_back = int(round(LOOK_BACK_S / ENVELOPE_FRAME_S))
    first = max(0, (rise - look_back) * frame)
    last = (rise + 1) * frame
    above = np.flatnonzero(np.abs(x[first:last]) > threshold)
    return first + int(above[0]) if above.size else rise * frame


def rough_f0_hz(x: np.ndarray, sample_rate_hz: float, lowest_hz: float = LOWEST_F0_HZ,
                highest_hz: float = HIGHEST_F0_HZ) -> float | None:
    """A rough f0 (within a few cents to a percent) of the note starting at ``x[0]``, searched in
    ``lowest_hz``..``highest_hz``; None when ``x`` is too short for the lowest one."""
    fs = float(sample_rate_hz)
    tau_min = max(2, int(math.floor(fs / highest_hz)))
    tau_max = int(math.ceil(fs / lowest_hz))
    window = max(int(YIN_WINDOW_S * fs), 2 * tau_max)
    start = int(YIN_SKIP_S * fs)
    if x.size < start + window + tau_max + 2:
        start = 0
    if x.size < window + tau_max + 2:
        return None
    seg = np.asarray(x[start : start + window + tau_max + 2], dtype=float)
    d = _difference(seg, window, tau_max + 1)
    cmnd = np.ones_like(d)
    running = np.cumsum(d[1:])
    with np.errstate(divide="ignore", invalid="ignore"):
        cmnd[1:] = np.where(running > 0, d[1:] * np.arange(1, d.size) / running, 1.0)
    tau = _first_dip(cmnd, tau_min, tau_max)
    if tau is None:
        return None
    return fs / _parabolic_min(cmnd, tau)


def _difference(seg: np.ndarray, window: int, lags: int) -> np.ndarray:
    """d(tau) = sum_{j < window} (x_j - x_{j+tau})^2 for tau = 0..lags-1 (YIN eq. 6), by FFT."""
    head = seg[:window]
    size = int(scipy.fft.next_fast_len(window + seg.size, real=True))
    corr = scipy.fft.irfft(np.conj(scipy.fft.rfft(head, size)) * scipy.fft.rfft(seg, size), size)[:lags]
    energy = np.concatenate(([0.0], np.cumsum(seg * seg)))
    shifted = energy[np.arange(lags) + window] - energy[np.arange(lags)]
    d: np.ndarray = np.maximum(float(np.sum(head * head)) + shifted - 2.0 * corr, 0.0)
    return d


def _first_dip(cmnd: np.ndarray, tau_min: int, tau_max: int) -> int | None:
    """The first local minimum under the threshold (YIN step 4), else the smallest value."""
    region = cmnd[tau_min : tau_max + 1]
    if region.size < 3:
        return None
    below = np.flatnonzero(region < YIN_THRESHOLD)
    if not below.size:
        # No dip under the threshold (a stiff or fast-dying string is less periodic): the first
        # local minimum nearly as deep as the deepest, not the deepest itself, which may lie at a
        # multiple of the period.
        inner = region[1:-1]
        minima = np.flatnonzero((inner <= region[:-2]) & (inner <= region[2:])) + 1
        deepest = float(region.min())
        near = minima[region[minima] <= deepest + YIN_RELAXED_MARGIN] if minima.size else minima
        below = near if near.size else np.array([int(np.argmin(region))])
    i = int(below[0])
    while i + 1 < region.size and region[i + 1] < region[i]:
        i += 1
    return tau_min + i


def _parabolic_min(values: np.ndarray, i: int) -> float:
    """The position of the minimum near index ``i`` from a parabola through it and its neighbours."""
    if i <= 0 or i >= values.size - 1:
        return float(i)
    a, b, c = values[i - 1], values[i], values[i + 1]
    denom = a - 2.0 * b + c
    return float(i) if denom <= 0 else i + 0.5 * float(a - c) / float(denom)
