"""A note at a string and fret, as the engine plays it: for whatever predicts the sound of a place
(the survey across the neck, the UI's bars) without running an engine.

The same formulas as the voice renderer's (:mod:`rtvoice.engine.places`): the string's
stiffness from its gauge (or given), grown as 2^(n/6) at fret n (Fletcher 1964, B ~ 1/L^2
at one tension); its own loss law; points fixed on the body (pluck, pickups) at
x 2^(n/12) of the stopped note (12-TET fret rule, common practice), a slanted pickup
at its distance under this string.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rtvoice.engine.notes import NoteModel, initial_amplitudes
from rtvoice.engine.settings import Settings, SettingsError
from rtvoice.engine.stringing import inharmonicity_of, t60s_of
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.frets import interpolate_across_strings, stiffness_at_fret
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.tuning import midi_note_to_hz


@dataclass(frozen=True)
class PlacedNote:
    """Where and what a note at ``string`` (1 = highest) and ``fret`` is.

    ``scale`` = 2^(fret/12): a fraction of the open scale length is ``scale`` times that
    fraction of this note's speaking length. ``slant_share`` is where the string lies
    across a slanted pickup: +1/2 under string 1, -1/2 under the last string.
    """

    note: int
    string: int
    fret: int
    f0_hz: float
    inharmonicity: float  # B at this fret
    t60_low_s: float
    t60_high_s: float
    scale: float
    slant_share: float

    def on_note(self, fraction_of_scale: float) -> float:
        """A point or width fixed on the body, as a fraction of this note's speaking length."""
        return float(fraction_of_scale) * self.scale

    def pickup_on_note(self, position: float, slant: float = 0.0) -> float:
        """A pickup's centre under this string (``position`` and ``slant`` as the settings hold them:
        fractions of the open scale), as a fraction of this note's speaking length."""
        return (float(position) + float(slant) * self.slant_share) * self.scale


def slant_shares(strings: np.ndarray | int, count: int) -> np.ndarray:
    """Where each of ``strings`` (1-based) lies across a slanted pickup of ``count`` strings: +1/2
    under string 1 (the treble end), -1/2 under the last, linearly between (equal spacing), by
    :func:`rtvoice.physics.frets.interpolate_across_strings`; 0 for a single string."""
    shares: np.ndarray = np.asarray(interpolate_across_strings(0.0, 1.0, strings, count)) - 0.5
    return shares


def placed_note(settings: Settings, string: int, fret: int) -> PlacedNote:
    """The note ``settings``' instrument sounds at ``string`` and ``fret``; SettingsError when it has no
    such string or fret."""
    strings = settings.strings
    frets = int(settings.get("instrument.frets"))
    if not 1 <= string <= len(strings):
        raise SettingsError("string", string, f"the instrument has strings 1 .. {len(strings)}")
    if not 0 <= fret <= frets:
        raise SettingsError("fret", fret, f"the instrument has frets 0 .. {frets}")
    note = int(strings[string - 1].note) + fret
    if note > 127:
        raise SettingsError("fret", fret, f"string {string} at fret {fret} is beyond MIDI note 127")
    n = len(strings)
    return PlacedNote(
        note=note, string=string, fret=fret,
        f0_hz=float(midi_note_to_hz(note, settings.get("tuning.a4_hz"))),
        inharmonicity=float(stiffness_at_fret(inharmonicity_of(settings, string), float(fret))),
        t60_low_s=t60s_of(settings, string)[0], t60_high_s=t60s_of(settings, string)[1],
        scale=2.0 ** (fret / 12.0),
        slant_share=float(slant_shares(string, n)),
    )


def note_model_at(settings: Settings, string: int, fret: int, n_modes: int, sample_rate_hz: float) -> NoteModel:
    """The :class:`NoteModel` of the note at ``string`` and ``fret``, plucked where the settings pluck
    (the spot fixed on the body)."""
    placed = placed_note(settings, string, fret)
    freqs = mode_frequencies_hz(placed.f0_hz, placed.inharmonicity, n_modes)
    sigma = decay_rate_per_s(freqs, *loss_coefficients(placed.t60_low_s, placed.t60_high_s))
    initial = initial_amplitudes(settings, n_modes, min(placed.on_note(settings.get("excitation.position")), 0.999),
                                 min(placed.on_note(settings.get("excitation.width")), 0.5),
                                 inharmonicity=placed.inharmonicity)
    return NoteModel(placed.note, placed.f0_hz, freqs, sigma, initial, playable_mode_count(freqs, sample_rate_hz))


__all__ = ["PlacedNote", "note_model_at", "placed_note", "slant_shares"]
