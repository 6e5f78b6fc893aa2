"""Pure functions of the string, its excitation, pickups, damping and electronics.

Everything here is a plain function over numpy arrays with units in the names or
docstrings. Nothing here keeps state, does I/O or imports from the rest of rtvoice.

Conventions: positions and widths are fractions of the speaking length measured
from the bridge (0 = bridge, 1 = nut); harmonic numbers ``k`` start at 1.
"""

from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients, t60_s
from rtvoice.physics.electronics import lowpass_biquad, lowpass_response, rlc_resonance
from rtvoice.physics.excitation import (
    excitation_amplitudes,
    pluck_amplitudes,
    pluck_shape,
    project_shape,
    shape_from_breakpoints,
    strike_velocity_coefficients,
)
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.pickup import aperture_weights, first_aperture_null, pickup_weights
from rtvoice.physics.tuning import midi_note_to_hz

__all__ = [
    "aperture_weights",
    "decay_rate_per_s",
    "excitation_amplitudes",
    "first_aperture_null",
    "loss_coefficients",
    "lowpass_biquad",
    "lowpass_response",
    "midi_note_to_hz",
    "mode_frequencies_hz",
    "pickup_weights",
    "playable_mode_count",
    "pluck_amplitudes",
    "pluck_shape",
    "project_shape",
    "rlc_resonance",
    "shape_from_breakpoints",
    "strike_velocity_coefficients",
    "t60_s",
]
