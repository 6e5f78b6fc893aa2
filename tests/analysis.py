"""Measurements on rendered audio, written independently of the engine's internals.

Everything here works on plain sample arrays: FFT peak picking, least-squares
fits of damped sinusoids, envelope decay fits.
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
