"""Frequency-dependent loss of string modes.

Each mode decays as exp(-sigma t) with sigma = b1 + b3 (2 pi f)^2: a constant
term (air and support losses) plus one growing with the square of frequency
(internal friction), the loss law used for struck and plucked strings.
T60 = 3 ln 10 / sigma is the time to fall by 60 dB.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

LN_1000 = 3.0 * math.log(10.0)  # 60 dB of amplitude decay is a factor of 1000
T60_LOW_REF_HZ = 100.0
T60_HIGH_REF_HZ = 2000.0


def loss_coefficients(
    t60_low_s: float,
    t60_high_s: float,
    f_low_hz: float = T60_LOW_REF_HZ,
    f_high_hz: float = T60_HIGH_REF_HZ,
) -> tuple[float, float]:
    """(b1 in 1/s, b3 in s) such that partials at ``f_low_hz`` and ``f_high_hz`` have the given T60s.

    Raises ValueError when the pair asks for a negative loss anywhere (a high
    partial that rings longer than a low one, or a ratio so steep that b1 < 0).
    """
    if t60_low_s <= 0 or t60_high_s <= 0:
        raise ValueError("decay times must be positive")
    s_low, s_high = LN_1000 / t60_low_s, LN_1000 / t60_high_s
    w_low, w_high = 2 * math.pi * f_low_hz, 2 * math.pi * f_high_hz
    b3 = (s_high - s_low) / (w_high**2 - w_low**2)
    b1 = s_low - b3 * w_low**2
    if b3 < 0:
        raise ValueError(
            f"T60 at {f_high_hz:g} Hz ({t60_high_s:g} s) must not exceed T60 at {f_low_hz:g} Hz "
            f"({t60_low_s:g} s)"
        )
    if b1 < 0:
        limit = (f_high_hz / f_low_hz) ** 2
        raise ValueError(
            f"T60 ratio {t60_low_s / t60_high_s:g} is steeper than the loss law allows "
            f"(at most {limit:g})"
        )
    return b1, b3


def decay_rate_per_s(freq_hz: ArrayLike, b1: float, b3: float) -> np.ndarray:
    """sigma(f) = b1 + b3 (2 pi f)^2 in 1/s."""
    w = 2 * np.pi * np.asarray(freq_hz, dtype=float)
    return b1 + b3 * w * w


def t60_s(sigma_per_s: ArrayLike) -> np.ndarray:
    """Time in seconds for an amplitude decaying at ``sigma_per_s`` to fall by 60 dB."""
    return LN_1000 / np.asarray(sigma_per_s, dtype=float)


def release_rate_per_s(sigma_per_s: ArrayLike, release_t60_s: float) -> np.ndarray:
    """Decay rate once a note is released (the string muted).

    Every mode decays at least as fast as a T60 of ``release_t60_s``; a mode that
    already dies faster keeps its own rate.
    """
    sigma_released: np.ndarray = np.maximum(np.asarray(sigma_per_s, dtype=float), LN_1000 / release_t60_s)
    return sigma_released
