"""What a note is: the initial mode amplitudes of an excitation, its modes' frequencies and decay,
the velocity curve and the electronics' resonance.

One place forms them, for the engine and for everything that predicts what the
engine will play (the survey, the UI's predicted bars).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import overload

import numpy as np
from numpy.typing import ArrayLike

from rtvoice.engine.settings import Settings
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.electronics import rlc_resonance
from rtvoice.physics.excitation import excitation_amplitudes
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.tuning import midi_note_to_hz

STRIKE_IMPULSE = 2.0  # a strike's travelling pulses are then of unit height, like a pluck's peak


def harmonic_stretch(inharmonicity: float, n_modes: int) -> np.ndarray:
    """f_k / f0 = k sqrt(1 + B k^2) for k = 1..n_modes (Fletcher's stiff-string formula)."""
    k = np.arange(1, n_modes + 1, dtype=float)
    return k * np.sqrt(1.0 + inharmonicity * k * k)


def initial_amplitudes(settings: Settings, n_modes: int, position: float | None = None,
                       width: float | None = None, inharmonicity: float | None = None) -> np.ndarray:
    """Complex amplitude of each mode at a full-velocity note-on, displacement units.

    A pluck sets a_k (real); a strike's velocity coefficients b_k become
    displacement amplitudes b_k / w_k in units of unit length and wave speed
    (w_k = pi f_k / f0), a quarter period behind (hence -i). ``position`` and
    ``width`` override the settings' excitation (per-note control, or a fretted note's
    fixed spot as a fraction of its speaking length); ``inharmonicity`` the sound's B
    (a fretted string's own).
    """
    s = settings
    a, b = excitation_amplitudes(
        s.get("excitation.kind"), n_modes,
        s.get("excitation.position") if position is None else position,
        s.get("excitation.width") if width is None else width,
        s.get("excitation.shape"),
    )
    stiffness = s.get("string.inharmonicity") if inharmonicity is None else inharmonicity
    stretch = harmonic_stretch(stiffness, n_modes)
    return a - 1j * STRIKE_IMPULSE * b / (np.pi * stretch)


@overload
def velocity_gain(velocity: int | float) -> float: ...
@overload
def velocity_gain(velocity: np.ndarray) -> np.ndarray: ...
def velocity_gain(velocity: ArrayLike) -> np.ndarray | float:
    """The square-law velocity curve (common practice): (v / 127)^2 for MIDI velocity v, held to 0..127."""
    v = np.clip(np.asarray(velocity, dtype=float), 0.0, 127.0) / 127.0
    gain: np.ndarray = v * v
    return float(gain) if gain.ndim == 0 else gain


def resonance_of(settings: Settings) -> tuple[float, float]:
    """(f_r in Hz, Q) of the electronics the settings describe; f_r = 0 means bypassed.

    Circuit values (``electronics.inductance_h`` above 0) give f_r and Q by
    :func:`rtvoice.physics.electronics.rlc_resonance`; otherwise they are set directly."""
    s = settings
    if s.get("electronics.inductance_h") > 0:
        return rlc_resonance(s.get("electronics.inductance_h"), s.get("electronics.resistance_ohm"),
                             s.get("electronics.capacitance_f"), s.get("electronics.load_ohm"))
    return float(s.get("electronics.resonance_hz")), float(s.get("electronics.q"))


@dataclass(frozen=True)
class NoteModel:
    """A note as the engine plays it, before the pickups: its modes' frequencies and decay rates
    while held, and their initial complex amplitudes at full velocity (displacement units).

    One description for the renderer's note-ons, the survey's maps and the UI's predicted bars;
    ``playable`` modes lie below 0.45 of the sample rate (the others are not rendered)."""

    note: int
    f0_hz: float
    freqs_hz: np.ndarray
    sigma_per_s: np.ndarray
    initial: np.ndarray
    playable: int


def note_model(settings: Settings, note: int, n_modes: int, sample_rate_hz: float,
               f0_hz: float | None = None) -> NoteModel:
    """The :class:`NoteModel` of MIDI ``note`` (or of ``f0_hz``, a bent note) with ``n_modes`` modes."""
    s = settings
    f0 = float(midi_note_to_hz(note, s.get("tuning.a4_hz"))) if f0_hz is None else float(f0_hz)
    freqs = mode_frequencies_hz(f0, s.get("string.inharmonicity"), n_modes)
    sigma = decay_rate_per_s(freqs, *loss_coefficients(s.get("string.t60_low"), s.get("string.t60_high")))
    return NoteModel(int(note), f0, freqs, sigma, initial_amplitudes(s, n_modes),
                     playable_mode_count(freqs, sample_rate_hz))
