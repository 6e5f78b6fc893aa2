"""What the model predicts each harmonic's level to be at the attack.

The prediction multiplies, per harmonic, the excitation's sine-series coefficient,
the summed pickup weight and the electronics response, then the velocity curve,
the engine's output scale and the output gain. Every factor comes from
:mod:`rtvoice.physics`; only the engine's two scale constants are taken from it.

On a fretted instrument a note is predicted where it sounds (:func:`predicted_levels_at`): the
engine's model of the note at its string and fret (:func:`rtvoice.engine.note_model_at`: that
string's stiffness and loss, the pluck fixed on the body), and each pickup's centre under that
string and its aperture as fractions of the note's speaking length (``PlacedNote.pickup_on_note``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from rtvoice.engine import (
    OUTPUT_SCALE,
    NoteModel,
    Settings,
    note_model,
    note_model_at,
    placed_note,
    resonance_of,
    velocity_gain,
)
from rtvoice.physics.electronics import lowpass_response
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
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
    model = note_model(settings, -1, n, sample_rate_hz, f0_hz)  # the engine's own note description
    return _levels(settings, model, settings.pickups, model.playable, velocity, electronics)


def _levels(settings: Settings, model: NoteModel, pickups: Sequence[Mapping[str, Any]], playable: int,
            velocity: int, electronics: bool) -> np.ndarray:
    """|initial amplitude x pickup weight| per mode, through the velocity curve, the output scale,
    and (``electronics``) the coil-and-cable response and the output gain."""
    k = np.arange(1, model.freqs_hz.size + 1, dtype=float)
    freqs = model.freqs_hz
    omega = 2 * np.pi * freqs
    weights = pickup_weights(k, pickups, model.sigma_per_s, omega, omega[0])
    level = np.abs(model.initial * weights) * velocity_gain(velocity) * OUTPUT_SCALE
    if electronics:
        level *= electronics_gain(settings, freqs)
        level *= 10.0 ** (settings.get("output.gain_db") / 20.0)
    level[playable:] = 0.0  # at or above 0.45 of the sample rate: not rendered
    return level


def attack_amplitudes_at(
    settings: Settings,
    string: int,
    fret: int,
    n: int,
    velocity: int = 100,
    sample_rate_hz: float = 48000.0,
    f0_hz: float | None = None,
    electronics: bool = True,
) -> np.ndarray:
    """Linear output amplitude of harmonics 1..n of the note at ``string`` and ``fret`` just after
    the pluck, as :func:`attack_amplitudes` for a fretted instrument (SettingsError when the
    instrument has no such place). ``f0_hz`` is the note's unstiffened pitch when bent: its modes
    move with it (the electronics and the 0.45 fs limit read them there)."""
    placed = placed_note(settings, string, fret)
    model = note_model_at(settings, string, fret, n, sample_rate_hz)
    if f0_hz is not None and math.isfinite(f0_hz) and f0_hz > 0:
        freqs = model.freqs_hz * (f0_hz / placed.f0_hz)
        model = NoteModel(model.note, f0_hz, freqs, model.sigma_per_s, model.initial,
                          playable_mode_count(freqs, sample_rate_hz))
    # The engine's pickup rows: centre and aperture under this string as fractions of the note,
    # a centre past the note's end held at its end (a node).
    pickups = [dict(p, position=min(placed.pickup_on_note(p["position"], p.get("slant", 0.0)), 1.0),
                    width=placed.on_note(p["width"])) for p in settings.pickups]
    return _levels(settings, model, pickups, model.playable, velocity, electronics)


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


def predicted_levels_at(
    settings: Settings,
    string: int,
    fret: int,
    n: int,
    velocity: int = 100,
    f0_hz: float | None = None,
    sample_rate_hz: float = 48000.0,
) -> np.ndarray:
    """Predicted attack level in dBFS (before the limiter) of harmonics 1..n of the note at
    ``string`` and ``fret`` of a fretted instrument (``f0_hz``: its unstiffened pitch when bent)."""
    return to_db(attack_amplitudes_at(settings, string, fret, n, velocity, sample_rate_hz, f0_hz))
