"""The engine's own mode data, gathered for many placements at once.

A note's mode k sounds as Re(g_k s_k exp((-sigma_k + i w_k) t)) before the output
stage, with s_k the initial complex amplitude and g_k the pickup weight. Its
amplitude in the output is |g_k s_k| times the gain of the output stage at f_k
(OUTPUT_SCALE, the electronics filter, the output gain, the DC blocker). Every
piece comes from the engine or the physics package, so the survey hears what the
engine plays. A note at a string and fret (a fretted instrument) takes its frequencies,
decay rates and initial amplitudes from the engine's note description
(:func:`rtvoice.engine.note_model_at`) and sees each pickup where the engine puts it
(:meth:`rtvoice.engine.PlacedNote.pickup_on_note`: fixed on the body, slanted per string).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.signal

from rtvoice.engine import (
    OUTPUT_SCALE,
    PlacedNote,
    Settings,
    dc_blocker,
    electronics_filter,
    initial_amplitudes,
    note_model_at,
    resonance_of,
)
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.pickup import pickup_weights
from rtvoice.physics.tuning import midi_note_to_hz
from rtvoice.survey.inputs import SurveyError
from rtvoice.survey.placing import NotePlace

SENSINGS = ("velocity", "displacement")


@dataclass(frozen=True)
class NoteModes:
    """The playable modes of one note (those below 0.45 of the sample rate)."""

    note: int
    freqs_hz: np.ndarray  # f_k, stiff-string frequencies
    sigma_per_s: np.ndarray  # decay rate while the note is held
    electronics_gain: np.ndarray  # |H(f_k)| of the coil-and-cable filter (1 when bypassed)
    chain_gain: np.ndarray  # OUTPUT_SCALE x output gain x |DC blocker(f_k)|
    placed: PlacedNote | None = None  # the string and fret on a fretted instrument (None: an open string of its own)

    @property
    def count(self) -> int:
        return int(self.freqs_hz.size)

    @property
    def f1_hz(self) -> float:
        """Frequency of the lowest mode (the sounding fundamental)."""
        return float(self.freqs_hz[0])


def _response(filt, freqs_hz: np.ndarray, fs: float) -> np.ndarray:
    if filt is None:
        return np.ones_like(freqs_hz)
    _, h = scipy.signal.freqz(filt.b, filt.a, worN=freqs_hz, fs=fs)
    return np.abs(h)


class EngineModel:
    """Mode data of ``settings`` as an :class:`Engine` at ``sample_rate_hz`` would play it.

    ``pickup_index`` is the pickup whose position, width and sensing the survey
    varies; the others stay as the settings have them and add to its signal.
    """

    def __init__(self, settings: Settings, sample_rate_hz: float = 48000.0, pickup_index: int = 0):
        if not 0 <= pickup_index < len(settings.pickups):
            raise SurveyError(
                "--pickup-index",
                pickup_index,
                f"the settings have {len(settings.pickups)} pickup(s): use 0 .. {len(settings.pickups) - 1}",
            )
        self.settings = settings
        self.fs = float(sample_rate_hz)
        self.pickup_index = pickup_index
        self.n_modes = settings.get("string.modes")
        f_r, q = resonance_of(settings)  # the engine's own note description (rtvoice.engine.notes)
        self._electronics = electronics_filter(f_r, q, self.fs)
        self._dc = dc_blocker(self.fs)
        self._gain = OUTPUT_SCALE * 10 ** (settings.get("output.gain_db") / 20)

    def output_poles(self) -> np.ndarray:
        """Poles z of the output filters (electronics, DC blocker): their own ringing is z^n."""
        filters = [f for f in (self._electronics, self._dc) if f is not None]
        return np.concatenate([np.roots(f.a) for f in filters]).astype(complex)

    def output_gains(self, freqs_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(electronics gain, chain gain) at ``freqs_hz`` of any shape, as :class:`NoteModes` holds them."""
        flat = np.asarray(freqs_hz, dtype=float).ravel()
        electronics = _response(self._electronics, flat, self.fs).reshape(np.shape(freqs_hz))
        chain = self._gain * _response(self._dc, flat, self.fs).reshape(np.shape(freqs_hz))
        return electronics, chain

    def note_modes(self, note: int, place: NotePlace | None = None) -> NoteModes:
        """The playable modes of ``note``; at ``place``'s string and fret when it is fretted."""
        if place is not None and place.placed is not None:
            return self._placed_modes(place.placed)
        s = self.settings
        f0 = midi_note_to_hz(note, s.get("tuning.a4_hz"))
        freqs = mode_frequencies_hz(f0, s.get("string.inharmonicity"), self.n_modes)
        freqs = freqs[: playable_mode_count(freqs, self.fs)]
        if freqs.size == 0:
            raise SurveyError("--note", note, f"no mode of this note lies below 0.45 x {self.fs:g} Hz")
        sigma = decay_rate_per_s(freqs, *loss_coefficients(s.get("string.t60_low"), s.get("string.t60_high")))
        return NoteModes(
            note,
            freqs,
            sigma,
            _response(self._electronics, freqs, self.fs),
            self._gain * _response(self._dc, freqs, self.fs),
        )

    def _placed_modes(self, placed: PlacedNote) -> NoteModes:
        model = note_model_at(self.settings, placed.string, placed.fret, self.n_modes, self.fs)
        count = model.playable
        if count == 0:
            raise SurveyError("--fret", placed.fret, f"no mode of string {placed.string} at this fret lies below "
                              f"0.45 x {self.fs:g} Hz")
        freqs = model.freqs_hz[:count]
        electronics, chain = self.output_gains(freqs)
        return NoteModes(placed.note, freqs, model.sigma_per_s[:count], electronics, chain, placed)

    def initial_amplitudes(self, pluck_positions: Sequence[float] | np.ndarray,
                           modes: NoteModes | None = None) -> np.ndarray:
        """Initial complex amplitudes s_k at full velocity, shape (n_pluck, string.modes).

        Formed where every note-on forms them (:func:`rtvoice.engine.initial_amplitudes`), so
        a pluck, a strike or a shape gives exactly what a note-on would. For a fretted note
        (``modes.placed``) the pluck positions are fractions of the open scale, fixed on the
        body, and the engine's note description at that string and fret forms them.
        """
        out = np.empty((len(pluck_positions), self.n_modes), complex)
        placed = modes.placed if modes is not None else None
        for i, p in enumerate(pluck_positions):
            if placed is None:
                out[i] = initial_amplitudes(self.settings, self.n_modes, position=float(p))
            else:
                out[i] = self._placed_initial(placed, float(p))
        return out

    def _placed_initial(self, placed: PlacedNote, pluck: float) -> np.ndarray:
        settings = self.settings
        if pluck != settings.get("excitation.position"):
            # The survey has checked the pluck against the neck (or chose to reach past the last
            # fret); the open rule lets the settings hold it, and note_model_at places the note by
            # string and fret whatever the rule.
            settings = settings.with_values({"instrument.assign": "open", "excitation.position": pluck})
        return note_model_at(settings, placed.string, placed.fret, self.n_modes, self.fs).initial

    def pickup_weights(self, modes: NoteModes, positions: Sequence[float] | np.ndarray, width: float,
                       sensing: str) -> np.ndarray:
        """Complex pickup weights g_k of the summed pickups, shape (n_positions, modes.count).

        For a fretted note (``modes.placed``) positions and widths are fractions of the open
        scale, fixed on the body; each pickup lies where the engine puts it under the note's
        string (its slant included) and covers the same width of string, a larger fraction.
        """
        k = np.arange(1, modes.count + 1, dtype=float)
        omega = 2 * np.pi * modes.freqs_hz
        pickups = [dict(p) for p in self.settings.pickups]
        out = np.empty((len(positions), modes.count), complex)
        for i, x in enumerate(positions):
            pickups[self.pickup_index] = {
                **pickups[self.pickup_index],
                "position": float(x),
                "width": float(width),
                "sensing": sensing,
            }
            heard = pickups if modes.placed is None else [_on_note(p, modes.placed) for p in pickups]
            out[i] = pickup_weights(k, heard, modes.sigma_per_s, omega, omega[0])
        return out

    def heard_weights(self, placed: PlacedNote, freqs_hz: np.ndarray, sigma_per_s: np.ndarray) -> np.ndarray:
        """Complex pickup weights g_k of the settings' own pickups for the note at ``placed`` (its modes at
        ``freqs_hz``, decaying at ``sigma_per_s``): what a note-on at that string and fret gets."""
        k = np.arange(1, freqs_hz.size + 1, dtype=float)
        omega = 2 * np.pi * freqs_hz
        heard = [_on_note(p, placed) for p in self.settings.pickups]
        weights: np.ndarray = pickup_weights(k, heard, sigma_per_s, omega, omega[0])
        return weights


def _on_note(pickup: Mapping[str, Any], placed: PlacedNote) -> dict[str, Any]:
    """A pickup as the note at ``placed`` senses it: centre and aperture as fractions of its speaking length."""
    return {
        **pickup,
        "position": placed.pickup_on_note(pickup["position"], pickup.get("slant", 0.0)),
        "width": placed.on_note(pickup["width"]),
    }
