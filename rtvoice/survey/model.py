"""The engine's own mode data, gathered for many placements at once.

A note's mode k sounds as Re(g_k s_k exp((-sigma_k + i w_k) t)) before the output
stage, with s_k the initial complex amplitude and g_k the pickup weight. Its
amplitude in the output is |g_k s_k| times the gain of the output stage at f_k
(OUTPUT_SCALE, the electronics filter, the output gain, the DC blocker). Every
piece comes from the engine or the physics package, so the survey hears what the
engine plays.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.signal

from rtvoice.engine import OUTPUT_SCALE, Settings, dc_blocker, electronics_filter, initial_amplitudes, resonance_of
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.pickup import pickup_weights
from rtvoice.physics.tuning import midi_note_to_hz
from rtvoice.survey.inputs import SurveyError

SENSINGS = ("velocity", "displacement")


@dataclass(frozen=True)
class NoteModes:
    """The playable modes of one note (those below 0.45 of the sample rate)."""

    note: int
    freqs_hz: np.ndarray  # f_k, stiff-string frequencies
    sigma_per_s: np.ndarray  # decay rate while the note is held
    electronics_gain: np.ndarray  # |H(f_k)| of the coil-and-cable filter (1 when bypassed)
    chain_gain: np.ndarray  # OUTPUT_SCALE x output gain x |DC blocker(f_k)|

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

    def note_modes(self, note: int) -> NoteModes:
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

    def initial_amplitudes(self, pluck_positions: Sequence[float] | np.ndarray) -> np.ndarray:
        """Initial complex amplitudes s_k at full velocity, shape (n_pluck, string.modes).

        Formed where every note-on forms them (:func:`rtvoice.engine.initial_amplitudes`), so
        a pluck, a strike or a shape gives exactly what a note-on would.
        """
        out = np.empty((len(pluck_positions), self.n_modes), complex)
        for i, p in enumerate(pluck_positions):
            out[i] = initial_amplitudes(self.settings, self.n_modes, position=float(p))
        return out

    def pickup_weights(self, modes: NoteModes, positions: Sequence[float] | np.ndarray, width: float,
                       sensing: str) -> np.ndarray:
        """Complex pickup weights g_k of the summed pickups, shape (n_positions, modes.count)."""
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
            out[i] = pickup_weights(k, pickups, modes.sigma_per_s, omega, omega[0])
        return out
