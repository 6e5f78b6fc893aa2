"""Pitch of a MIDI note in 12-tone equal temperament."""

from __future__ import annotations

from typing import overload

import numpy as np
from numpy.typing import ArrayLike

A4_MIDI_NOTE = 69  # MIDI 1.0 Detailed Specification: note 69 is A4


# A scalar note (bent by a scalar) gives a float, an array of notes an array.
@overload
def midi_note_to_hz(note: float, a4_hz: float = 440.0, bend_semitones: float = 0.0) -> float: ...
@overload
def midi_note_to_hz(note: np.ndarray, a4_hz: float = 440.0, bend_semitones: ArrayLike = 0.0) -> np.ndarray: ...
@overload
def midi_note_to_hz(note: ArrayLike, a4_hz: float = 440.0, bend_semitones: ArrayLike = 0.0) -> float | np.ndarray: ...
def midi_note_to_hz(note: ArrayLike, a4_hz: float = 440.0, bend_semitones: ArrayLike = 0.0) -> float | np.ndarray:
    """Fundamental in Hz of MIDI ``note`` bent by ``bend_semitones``.

    f = a4_hz * 2 ** ((note + bend - 69) / 12); ``a4_hz`` is the reference pitch of
    note 69 (440 Hz by ISO 16).
    """
    semis = np.asarray(note, dtype=float) + np.asarray(bend_semitones, dtype=float)
    hz = a4_hz * np.exp2((semis - A4_MIDI_NOTE) / 12.0)
    return float(hz) if np.ndim(hz) == 0 else hz
