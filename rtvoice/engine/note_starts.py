"""What a note-on at each place computes from its place alone, kept until the settings change.

A place is where a note sounds: its MIDI note under the open rule, else its string and
fret (:mod:`rtvoice.engine.instrument`). A note's mode frequencies, held decay rates,
which of its modes are heard and, with no pitch bend, its velocity-pickup factors depend
only on its place and on the string and tuning settings. Working them out is a dozen small array operations per
note-on; kept per note they are a few row copies. The rows are filled the first time
a note is played and forgotten when :class:`~rtvoice.engine.note_tables.NoteTables`
starts a new epoch (a string, tuning, excitation or electronics change), so they never
outlive the settings they came from.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from rtvoice.physics.modes import NYQUIST_MARGIN
from rtvoice.physics.pickup import velocity_factor

MIDI_NOTES = 128

#: freqs_of(places) -> mode frequencies in Hz, shape (len(places), modes);
#: sigma_of(places, freqs) -> their decay rates, 1/s.
FreqsOf = Callable[[np.ndarray], np.ndarray]
SigmaOf = Callable[[np.ndarray, np.ndarray], np.ndarray]


class NoteStarts:
    """Rows per MIDI note for ``modes`` modes at ``sample_rate_hz``: ``omega`` (rad/s), ``sigma`` (1/s),
    ``plucked`` (1.0 where a note-on gives the mode amplitude: below the Nyquist margin), ``audible``
    (the same test on omega, as :class:`~rtvoice.engine.voices.VoicePool` makes it for a bent voice)
    and ``deriv`` (the unbent velocity factor)."""

    def __init__(self, modes: int, sample_rate_hz: float, keep: bool = True, places: int = MIDI_NOTES):
        self.fs = float(sample_rate_hz)
        self.keep = keep  # False: every row is worked out afresh at every note-on (a reference for tests)
        self.places = places
        shape = (places, modes)
        self.omega = np.zeros(shape)
        self.sigma = np.zeros(shape)
        self.plucked = np.zeros(shape)
        self.audible = np.zeros(shape)
        self.deriv = np.zeros(shape, complex)
        for arr in (self.omega, self.sigma, self.plucked, self.audible, self.deriv):
            arr.fill(0)  # np.zeros maps pages lazily: written now, a new place's first note takes no page faults
        self._have = [False] * places
        self.epoch = -1
        self.hits = 0

    def rows(self, notes: Sequence[int], epoch: int, freqs_of: FreqsOf, sigma_of: SigmaOf) -> np.ndarray:
        """Row indices (the places) of places ``notes``, filling the rows not yet worked out in ``epoch``."""
        if epoch != self.epoch or not self.keep:
            self._have = [False] * self.places
            self.epoch = epoch
        missing = sorted({n for n in notes if not self._have[n]})
        self.hits += len(notes) - sum(notes.count(n) for n in missing)
        if missing:
            new = np.array(missing)
            freqs = freqs_of(new)
            omega = 2 * np.pi * freqs
            sigma = sigma_of(new, freqs)
            self.omega[new] = omega
            self.sigma[new] = sigma
            self.plucked[new] = freqs < NYQUIST_MARGIN * self.fs
            self.audible[new] = omega < 2 * np.pi * NYQUIST_MARGIN * self.fs
            self.deriv[new] = velocity_factor(sigma, omega, omega[:, :1])
            for n in missing:
                self._have[n] = True
        return np.array(notes)
