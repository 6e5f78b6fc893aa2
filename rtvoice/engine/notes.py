"""What a note-on sets up: the initial mode amplitudes of an excitation.

One place forms them, for the engine and for everything that predicts what the
engine will play (the survey, the UI's predicted bars).
"""

from __future__ import annotations

import numpy as np

from rtvoice.engine.settings import Settings
from rtvoice.physics.excitation import excitation_amplitudes

STRIKE_IMPULSE = 2.0  # a strike's travelling pulses are then of unit height, like a pluck's peak


def harmonic_stretch(inharmonicity: float, n_modes: int) -> np.ndarray:
    """f_k / f0 = k sqrt(1 + B k^2) for k = 1..n_modes (Fletcher's stiff-string formula)."""
    k = np.arange(1, n_modes + 1, dtype=float)
    return k * np.sqrt(1.0 + inharmonicity * k * k)


def initial_amplitudes(settings: Settings, n_modes: int, position: float | None = None,
                       width: float | None = None) -> np.ndarray:
    """Complex amplitude of each mode at a full-velocity note-on, displacement units.

    A pluck sets a_k (real); a strike's velocity coefficients b_k become
    displacement amplitudes b_k / w_k in units of unit length and wave speed
    (w_k = pi f_k / f0), a quarter period behind (hence -i). ``position`` and
    ``width`` override the settings' excitation (per-note control).
    """
    s = settings
    a, b = excitation_amplitudes(
        s.get("excitation.kind"), n_modes,
        s.get("excitation.position") if position is None else position,
        s.get("excitation.width") if width is None else width,
        s.get("excitation.shape"),
    )
    stretch = harmonic_stretch(s.get("string.inharmonicity"), n_modes)
    return a - 1j * STRIKE_IMPULSE * b / (np.pi * stretch)
