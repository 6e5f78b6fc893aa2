"""What a note's place makes of it: its string's stiffness and loss, and where the pluck and the
pickups fall on its speaking length.

On a fretted instrument the pluck and the pickups stay where they are on the body
while a fret shortens the vibrating part of the string. A point fixed at a fraction
x of the open scale length lies at x 2^(n/12) of a note stopped at fret n (12-TET
fret rule, common practice; :func:`rtvoice.physics.frets.fraction_of_speaking_length`),
and an aperture or a contact of fixed width covers the same larger fraction. The
stiffness of the shortened string at the same tension grows as 1/L^2, so
B_n = B_open 2^(n/6) (:func:`rtvoice.physics.frets.stiffness_at_fret`); the loss law
stays a function of frequency, the string's own.

Settings keep positions and widths as fractions of the open scale length; a slanted
pickup's centre is ``position`` and it sits ``slant`` / 2 further from the saddle under
string 1 (the treble side) and ``slant`` / 2 nearer under the last string, linearly
across the strings between (equal string spacing).

Under the open rule none of this applies: every note is an open string of its own,
and the voice renderer uses the sound's one stretch, loss law and pickup weights.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from rtvoice.engine.changes import Excitation
from rtvoice.engine.instrument import OPEN_PLACES, Instrument, string_and_fret, strings_and_frets
from rtvoice.engine.notes import harmonic_stretch, initial_amplitudes
from rtvoice.engine.placed_notes import slant_shares
from rtvoice.engine.settings import Settings
from rtvoice.engine.stringing import inharmonicity_of, t60s_of
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.frets import stiffness_at_fret
from rtvoice.physics.pickup import level_gain
from rtvoice.physics.tuning import midi_note_to_hz

INITIAL_CACHE = 512  # kept initial amplitude rows (place, excitation): 7-bit per-note controllers repeat values


class PlaceModel:
    """Per-place stretch, loss law, initial amplitudes and pickup weights of ``modes`` modes, for the
    settings and instrument last given to :meth:`prepare`. Rows are worked out when first asked for
    and kept until the next :meth:`prepare` (pickup rows: until the pickups move)."""

    def __init__(self, modes: int):
        self.modes = modes
        self.k = np.arange(1, modes + 1, dtype=float)
        self._stretch: dict[int, np.ndarray] = {}
        self._initial: dict[tuple[int, Excitation | None], np.ndarray] = {}
        self._weight_abs: dict[int, np.ndarray] = {}
        self._open_disp = self._open_vel = np.zeros(modes)
        self._open_weight: np.ndarray | None = None
        self._aperture_key: tuple[tuple[float, float, int], ...] = ()
        self._aperture_rows: dict[int, np.ndarray] = {}  # per place, for the pickups' widths and levels in the key

    def prepare(self, settings: Settings, instrument: Instrument, open_initial: np.ndarray,
                open_stretch: np.ndarray) -> None:
        """Take the string and excitation settings and the instrument, and the sound's own initial
        amplitudes and stretch (the open rule's); every kept row is forgotten."""
        self.settings = settings
        self.instrument = instrument
        self.open_initial = open_initial
        self.open_stretch = open_stretch
        self._open_weight = None
        n = len(instrument.open_notes)
        self.open_notes = np.array(instrument.open_notes, dtype=int)
        self.string_b = np.array([inharmonicity_of(settings, s) for s in range(1, n + 1)])
        loss = [loss_coefficients(*t60s_of(settings, s)) for s in range(1, n + 1)]
        self.string_b1 = np.array([b1 for b1, _ in loss])
        self.string_b3 = np.array([b3 for _, b3 in loss])
        # Where each string lies across the slant: +1/2 under string 1 (treble), -1/2 under the last.
        self.slant_share = slant_shares(np.arange(1, n + 1), n)
        self._stretch.clear()
        self._initial.clear()
        self._weight_abs.clear()

    # -- per place ------------------------------------------------------------------
    @staticmethod
    def split(places: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(string index from 0, fret) of fretted ``places``."""
        string, fret = strings_and_frets(places)
        return string - 1, fret

    def note_of(self, places: np.ndarray) -> np.ndarray:
        """The MIDI note each fretted place sounds (its string's open note plus the fret)."""
        string0, fret = self.split(places)
        notes: np.ndarray = self.open_notes[string0] + fret
        return notes

    def stretch(self, place: int) -> np.ndarray:
        """f_k / f0 of a fretted place: Fletcher's stiff-string formula with the fretted B."""
        row = self._stretch.get(place)
        if row is None:
            string, fret = string_and_fret(place)
            b = float(stiffness_at_fret(float(self.string_b[string - 1]), float(fret)))
            row = self._stretch[place] = harmonic_stretch(b, self.modes)
        return row

    def frequencies_hz(self, places: np.ndarray, a4_hz: float) -> np.ndarray:
        """Mode frequencies in Hz of fretted ``places``, shape (len(places), modes)."""
        f0 = midi_note_to_hz(self.note_of(places), a4_hz)
        return np.stack([f0[i] * self.stretch(int(p)) for i, p in enumerate(places)])

    def decay_rates(self, places: np.ndarray, freqs_hz: np.ndarray) -> np.ndarray:
        """Held decay rates in 1/s of fretted ``places`` at their mode frequencies (each string's loss law)."""
        string0, _ = self.split(places)
        rates: np.ndarray = decay_rate_per_s(freqs_hz, self.string_b1[string0][:, None],
                                             self.string_b3[string0][:, None])
        return rates

    def position_scale(self, places: np.ndarray) -> np.ndarray:
        """2^(n/12) of each place's fret n: a fraction of the open scale as a fraction of the note."""
        _, fret = self.split(places)
        scale: np.ndarray = 2.0 ** (fret / 12.0)
        return scale

    def initial_for(self, place: int, excitation: Excitation | None) -> np.ndarray:
        """Initial complex mode amplitudes at full velocity of a note at ``place`` plucked at the
        sound's spot (``excitation`` None) or its own."""
        if place < OPEN_PLACES and excitation is None:
            return self.open_initial
        key = (place if place >= OPEN_PLACES else -1, excitation)  # every open place alike
        row = self._initial.get(key)
        if row is None and place < OPEN_PLACES:
            assert excitation is not None
            if len(self._initial) >= INITIAL_CACHE:
                self._initial.clear()
            row = self._initial[key] = initial_amplitudes(self.settings, self.modes, excitation.position,
                                                          excitation.width)
        if row is None:
            s = self.settings
            position = s.get("excitation.position") if excitation is None else excitation.position
            width = s.get("excitation.width") if excitation is None else excitation.width
            scale = float(self.position_scale(np.array([place]))[0])
            string, fret = string_and_fret(place)
            b = float(stiffness_at_fret(float(self.string_b[string - 1]), float(fret)))
            if len(self._initial) >= INITIAL_CACHE:
                self._initial.clear()
            # A pluck past the note's end (only a per-note control can ask for one) is held just inside it.
            row = self._initial[key] = initial_amplitudes(
                s, self.modes, min(position * scale, 0.999), min(width * scale, 0.5), inharmonicity=b)
        return row

    # -- pickups ----------------------------------------------------------------------
    def pickup_rows(self, places: np.ndarray, pickups: Sequence[Mapping[str, Any]]) -> tuple[np.ndarray, np.ndarray]:
        """(displacement, velocity) pickup weight sums per mode of fretted ``places``, each of shape
        (len(places), modes): sin(k pi x) sinc(k pi w / 2) times each pickup's signed level, with x and
        w each pickup's centre and aperture under the place's string as fractions of the note.

        A swinging pickup asks for this every block, so the parts that do not move with it (each
        place's apertures times the levels) are kept until a width or a level changes, and sin(k pi x)
        for k = 1..modes comes from the powers of exp(i pi x) (one running product instead of a sine
        per mode; the rounding grows as k times the unit roundoff, 1e-13 at 512 modes).
        """
        places = np.asarray(places, dtype=int)
        string0, fret = self.split(places)
        # A voice from before the open rule was left (fading out) sees the pickups as the open rule did.
        fretted = places >= OPEN_PLACES
        scale = np.where(fretted, 2.0 ** (fret / 12.0), 1.0)[:, None]  # (n, 1)
        share = np.where(fretted, self.slant_share[np.clip(string0, 0, len(self.slant_share) - 1)], 0.0)[:, None]
        centre = np.array([float(p["position"]) for p in pickups])[None, :]
        slant = np.array([float(p.get("slant", 0.0)) for p in pickups])[None, :]
        x = np.minimum((centre + slant * share) * scale, 1.0)  # (n, pickups); 1.0: a node (never asked by the checks)
        powers = np.empty((places.size, len(pickups), self.modes), complex)
        powers[:] = np.exp(1j * np.pi * x)[:, :, None]
        np.cumprod(powers, axis=2, out=powers)  # exp(i k pi x), k = 1..modes
        each = powers.imag * self._apertures(places, scale[:, 0], pickups)  # (n, pickups, modes)
        velocity = np.array([p["sensing"] == "velocity" for p in pickups])
        disp = each[:, ~velocity].sum(axis=1)
        vel = each[:, velocity].sum(axis=1)
        return disp, vel

    def _apertures(self, places: np.ndarray, scale: np.ndarray, pickups: Sequence[Mapping[str, Any]]) -> np.ndarray:
        """sinc(k pi w / 2) times the signed level of each pickup at each place, shape (n, pickups, modes)."""
        key = tuple((float(p["width"]), float(p["level_db"]), int(p["polarity"])) for p in pickups)
        if key != self._aperture_key:
            self._aperture_key = key
            self._aperture_rows.clear()
        rows = []
        for place, factor in zip(places.tolist(), scale.tolist(), strict=True):
            row = self._aperture_rows.get(place)
            if row is None:
                k = self.k[None, :]
                u = k * (0.5 * np.pi * np.array([w for w, _, _ in key])[:, None] * factor)
                sinc = np.divide(np.sin(u), u, out=np.ones_like(u), where=u != 0)
                gain = np.array([level_gain(db, polarity) for _, db, polarity in key])[:, None]
                row = self._aperture_rows[place] = sinc * gain
            rows.append(row)
        return np.stack(rows)

    def forget_pickups(self, open_disp: np.ndarray, open_vel: np.ndarray) -> None:
        """The pickups moved: the kept level bounds no longer hold. ``open_disp`` and ``open_vel`` are
        the open rule's pickup sums (one row for every note)."""
        self._weight_abs.clear()
        self._open_disp, self._open_vel = open_disp, open_vel
        self._open_weight = None

    def weight_abs(self, place: int, pickups: Sequence[Mapping[str, Any]]) -> np.ndarray:
        """|disp + i (w_k / w_1) vel| per mode of ``place``: its pickup weight without the small damping
        term of the velocity factor (for the level bound a note-on will have)."""
        if place < OPEN_PLACES:
            if self._open_weight is None:
                self._open_weight = np.abs(self._open_disp + 1j * self.open_stretch * self._open_vel)
            return self._open_weight
        row = self._weight_abs.get(place)
        if row is None:
            disp, vel = self.pickup_rows(np.array([place]), pickups)
            row = self._weight_abs[place] = np.abs(disp[0] + 1j * self.stretch(place) * vel[0])
        return row


__all__ = ["PlaceModel"]
