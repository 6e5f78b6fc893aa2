"""Measurements on rendered audio, written independently of the engine's internals.

Everything here works on plain sample arrays: FFT peak picking, least-squares
fits of damped sinusoids, envelope decay fits, and two measurements that hold through the steps
an audio server's xrun leaves in a recording (a period dropped, repeated or silent).
"""

from __future__ import annotations

import numpy as np


def peak_frequency_hz(x: np.ndarray, fs: float, guess_hz: float, search_hz: float, pad: int = 8) -> float:
    """Frequency of the largest spectral peak within guess +- search, Hann window, parabolic interpolation."""
    n = x.size
    win = np.hanning(n)
    spec = np.abs(np.fft.rfft(x * win, pad * n))
    freqs = np.fft.rfftfreq(pad * n, 1 / fs)
    band = np.flatnonzero(np.abs(freqs - guess_hz) <= search_hz)
    i = band[np.argmax(spec[band])]
    a, b, c = np.log(spec[i - 1 : i + 2] + 1e-300)
    offset = 0.5 * (a - c) / (a - 2 * b + c)
    return float(freqs[i] + offset * fs / (pad * n))


def steady_frequency_hz(x: np.ndarray, fs: float, guess_hz: float, search_hz: float, cycles: int = 4) -> float:
    """Frequency of the partial near ``guess_hz`` (within ``search_hz``) from its phase advance,
    unmoved by a few steps in ``x``.

    The FFT peak of the whole window (:func:`peak_frequency_hz`) is refined by demodulating at it,
    measuring the phase of each Hann-weighted block of ``2 * cycles`` periods (hop ``cycles``
    periods; the Hann window's sidelobes keep the other harmonics out) and taking the median of
    the phase advance from block to block. A step in the recording falls into two or three of the
    advances; the median ignores them as long as they are fewer than half. On a clean tone this
    is the phase-vocoder frequency estimate (Flanagan & Golden, "Phase Vocoder", Bell System
    Technical Journal 45(9), 1966).
    """
    coarse = peak_frequency_hz(x, fs, guess_hz, search_hz)
    hop = int(round(cycles * fs / coarse))
    length = 2 * hop
    starts = np.arange(0, x.size - length + 1, hop)
    if starts.size < 3:
        raise ValueError(f"{x.size} samples hold too few blocks of {length} for a median")
    n = np.arange(x.size)
    z = x * np.exp(-2j * np.pi * coarse * n / fs)
    win = np.hanning(length)
    phasors = np.array([np.dot(z[s : s + length], win) for s in starts])
    advance = np.angle(phasors[1:] * np.conj(phasors[:-1]))
    return float(coarse + np.median(advance) * fs / (2 * np.pi * hop))


def relative_levels_through_steps(x: np.ndarray, fs: float, freqs_hz: np.ndarray, sigmas: np.ndarray,
                                  parts: int = 6) -> np.ndarray:
    """Level of each partial relative to the first, |c_k| / |c_0| by :func:`fit_damped_modes`,
    fitted on each of ``parts`` equal pieces of ``x`` and the median taken across pieces, so that
    a step in one or two pieces (a period dropped or repeated by the server) does not move it."""
    n = x.size // parts
    rel = []
    for j in range(parts):
        c = np.abs(fit_damped_modes(x[j * n : (j + 1) * n], fs, freqs_hz, sigmas))
        rel.append(c / c[0])
    return np.median(np.array(rel), axis=0)


def fit_damped_modes(x: np.ndarray, fs: float, freqs_hz: np.ndarray, sigmas: np.ndarray) -> np.ndarray:
    """Complex amplitudes c_k of x[n] ~ sum_k Re(c_k exp((-sigma_k + 2 pi i f_k) n / fs)) by least squares."""
    t = np.arange(x.size) / fs
    env = np.exp(-np.outer(t, sigmas))
    ph = 2 * np.pi * np.outer(t, freqs_hz)
    basis = np.hstack([env * np.cos(ph), -env * np.sin(ph)])
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    k = len(freqs_hz)
    return coef[:k] + 1j * coef[k:]


def decay_rate_per_s(x: np.ndarray, fs: float, freq_hz: float, others_hz: np.ndarray, window_s: float = 0.05) -> float:
    """Decay rate sigma of the partial at ``freq_hz``: amplitude per window by least squares
    (the other partials fitted alongside as undamped tones), then a line through log amplitude."""
    n = int(window_s * fs)
    freqs = np.concatenate([[freq_hz], others_hz])
    amps, times = [], []
    for start in range(0, x.size - n, n):
        c = fit_damped_modes(x[start : start + n], fs, freqs, np.zeros(freqs.size))
        amps.append(abs(c[0]))
        times.append((start + n / 2) / fs)
    slope, _ = np.polyfit(times, np.log(amps), 1)
    return float(-slope)


def db(x: np.ndarray | float) -> np.ndarray | float:
    return 20 * np.log10(np.abs(x))
