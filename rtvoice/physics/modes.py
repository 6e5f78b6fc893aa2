"""Mode frequencies of a stiff string."""

from __future__ import annotations

import numpy as np

#: Modes at or above this fraction of the sample rate are left out (no aliasing).
NYQUIST_MARGIN = 0.45


def mode_frequencies_hz(f0_hz: float, inharmonicity: float, n_modes: int) -> np.ndarray:
    """Frequencies in Hz of modes k = 1..n_modes of a stiff string.

    f_k = k f0 sqrt(1 + B k^2) with B the inharmonicity coefficient (Fletcher's
    stiff-string formula). ``f0_hz`` is the frequency the string would have without
    stiffness.
    """
    k = np.arange(1, n_modes + 1, dtype=float)
    return k * f0_hz * np.sqrt(1.0 + inharmonicity * k * k)


def playable_mode_count(freqs_hz: np.ndarray, sample_rate_hz: float) -> int:
    """How many leading modes lie below ``NYQUIST_MARGIN`` times the sample rate.

    ``freqs_hz`` must be increasing, as :func:`mode_frequencies_hz` returns them.
    """
    return int(np.searchsorted(freqs_hz, NYQUIST_MARGIN * sample_rate_hz, side="left"))


def unstiffened_f0_hz(first_mode_hz: float, inharmonicity: float) -> float:
    """The frequency f0 a stiff string would have without stiffness, from its first mode's
    f_1 = f0 sqrt(1 + B) (Fletcher's stiff-string formula at k = 1)."""
    return float(first_mode_hz / np.sqrt(1.0 + inharmonicity))
