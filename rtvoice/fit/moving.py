"""Moving the pickup (or the pluck) on a recording: each partial's level changed by the ratio of the
new place's weight to the fitted one's, the rest of the take kept as it was.

The take is filtered once, whole, in the frequency domain: a zero-phase gain that is the partial's
ratio across a band around each partial (a raised-cosine taper over its outer part, so nothing
rings) and 1 elsewhere, where the attack's noise and whatever the model does not explain live. The
idea has a published precedent (Mohamad, Dixon & Harte, "Digitally moving an electric guitar
pickup", DAFx 2015, with a least-squares FIR instead). A ratio's sign (a partial whose phase flips
between the two places) is kept: the gain is real and may be negative.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

#: The band around a partial that its ratio scales: this share of the distance to each neighbour.
BAND_SHARE = 0.45
#: Of each half band, the inner share is flat and the rest tapers to 1 (raised cosine).
FLAT_SHARE = 0.5


def partial_gain(freqs_hz: np.ndarray, partial_hz: Sequence[float] | np.ndarray,
                 ratio: Sequence[float] | np.ndarray) -> np.ndarray:
    """The gain at ``freqs_hz`` (Hz, >= 0) that scales each partial (at ``partial_hz``, ascending)
    by its ``ratio`` and leaves the rest alone."""
    centres = np.asarray(partial_hz, dtype=float)
    ratios = np.asarray(ratio, dtype=float)
    if centres.shape != ratios.shape:
        raise ValueError("one ratio per partial")
    gain = np.ones_like(freqs_hz, dtype=float)
    if centres.size == 0:
        return gain
    gaps = np.diff(centres)
    below = np.concatenate([[gaps[0] if gaps.size else centres[0]], gaps])
    above = np.concatenate([gaps, [gaps[-1] if gaps.size else centres[0]]])
    for centre, r, lo_gap, hi_gap in zip(centres, ratios, below, above, strict=True):
        for side, gap in ((-1.0, lo_gap), (1.0, hi_gap)):
            half = BAND_SHARE * gap
            flat = FLAT_SHARE * half
            offset = side * (freqs_hz - centre)
            inside = (offset >= 0) & (offset <= half)
            if not inside.any():
                continue
            d = offset[inside]
            taper = np.where(d <= flat, 1.0, 0.5 * (1.0 + np.cos(np.pi * (d - flat) / (half - flat))))
            gain[inside] = 1.0 + (r - 1.0) * taper
    return gain


def move_partials(samples: np.ndarray, sample_rate_hz: float, partial_hz: Sequence[float] | np.ndarray,
                  ratio: Sequence[float] | np.ndarray) -> np.ndarray:
    """``samples`` with each partial (at ``partial_hz``) scaled by its ``ratio``; the rest unchanged.

    Zero-padded to twice the length before the transform, so the filter's short response does not
    wrap the tail onto the onset."""
    x = np.asarray(samples, dtype=float)
    n = x.size
    size = 1 << int(np.ceil(np.log2(max(2 * n, 2))))
    spectrum = np.fft.rfft(x, size)
    spectrum *= partial_gain(np.fft.rfftfreq(size, 1.0 / sample_rate_hz), partial_hz, ratio)
    out: np.ndarray = np.fft.irfft(spectrum, size)[:n]
    return out


__all__ = ["BAND_SHARE", "move_partials", "partial_gain"]
