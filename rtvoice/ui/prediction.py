"""What the model predicts each harmonic's level to be at the attack.

The prediction multiplies, per harmonic, the excitation's sine-series coefficient,
the summed pickup weight and the electronics response, then the velocity curve,
the engine's output scale and the output gain. Every factor comes from
:mod:`rtvoice.physics`; only the engine's two scale constants are taken from it.
"""

from __future__ import annotations

import math

import numpy as np

from rtvoice.engine import OUTPUT_SCALE, Settings, note_model, resonance_of, velocity_gain
from rtvoice.physics.electronics import lowpass_response
from rtvoice.physics.modes import mode_frequencies_hz
from rtvoice.physics.pickup import pickup_weights
from rtvoice.physics.tuning import midi_note_to_hz

FLOOR_DB = -200.0  # stands for "nothing": log of zero


def electronics_gain(settings: Settings, freqs_hz: np.ndarray) -> np.ndarray:
    """|H(f)| of the coil-and-cable low-pass at ``freqs_hz`` (1 when bypassed)."""
    f_r, q = resonance_of(settings)
    if f_r <= 0:
        return np.ones_like(np.asarray(freqs_hz, dtype=float))
    return np.abs(lowpass_response(freqs_hz, f_r, q))


def harmonic_frequencies_hz(settings: Settings, f0_hz: float, n: int) -> np.ndarray:
    """Frequencies of the first ``n`` modes for a string whose unstiffened pitch is ``f0_hz``."""
    return mode_frequencies_hz(f0_hz, settings.get("string.inharmonicity"), n)


def attack_amplitudes(
    settings: Settings,
    f0_hz: float,
    n: int,
    velocity: int = 100,
    sample_rate_hz: float = 48000.0,
    electronics: bool = True,
) -> np.ndarray:
    """Linear output amplitude of harmonics 1..n just after the pluck or strike.

    A strike's velocity coefficients become displacement amplitudes b_k / w_k, with
    w_k in units of the unstiffened fundamental, as the engine does. Modes at or
    above 0.45 of the sample rate are not rendered and predict 0.
    """
    k = np.arange(1, n + 1, dtype=float)
    model = note_model(settings, -1, n, sample_rate_hz, f0_hz)  # the engine's own note description
    freqs = model.freqs_hz
    omega = 2 * np.pi * freqs
    weights = pickup_weights(k, settings.pickups, model.sigma_per_s, omega, omega[0])
    level = np.abs(model.initial * weights) * velocity_gain(velocity) * OUTPUT_SCALE
    if electronics:
        level *= electronics_gain(settings, freqs)
        level *= 10.0 ** (settings.get("output.gain_db") / 20.0)
    level[model.playable:] = 0.0  # at or above 0.45 of the sample rate: not rendered
    return level


def to_db(amplitude: np.ndarray) -> np.ndarray:
    """20 log10 |x|, with :data:`FLOOR_DB` for zero."""
    x = np.abs(np.asarray(amplitude, dtype=float))
    with np.errstate(divide="ignore"):
        return np.where(x > 0, 20.0 * np.log10(np.maximum(x, 1e-300)), FLOOR_DB)


def predicted_levels_db(
    settings: Settings,
    note: int,
    n: int,
    velocity: int = 100,
    f0_hz: float | None = None,
    sample_rate_hz: float = 48000.0,
) -> np.ndarray:
    """Predicted attack level in dBFS (before the limiter) of harmonics 1..n of ``note``.

    ``f0_hz`` overrides the note's equal-tempered pitch (a bent note).
    """
    if f0_hz is None or not math.isfinite(f0_hz) or f0_hz <= 0:
        f0_hz = midi_note_to_hz(note, settings.get("tuning.a4_hz"))
    return to_db(attack_amplitudes(settings, f0_hz, n, velocity, sample_rate_hz))
