"""Two sounds side by side for one note: what the A/B view shows and says.

Both slots are predicted with the model the harmonic bars use (attack levels of each
harmonic, after pickups, electronics and output gain), so a comparison needs no sound
to be playing. The differences named are the ones a player hears when flipping: total
level, spectral centroid (brightness), and harmonics one sound has and the other lacks. On a
fretted instrument a slot is predicted at the note's string and fret, where it has that place.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rtvoice.engine import Settings, placed_note
from rtvoice.physics.modes import mode_frequencies_hz
from rtvoice.physics.tuning import midi_note_to_hz
from rtvoice.ui.fretting import Place, is_fretted, place_fits
from rtvoice.ui.prediction import FLOOR_DB, harmonic_frequencies_hz, predicted_levels_at, predicted_levels_db

#: A harmonic this far below the sound's strongest counts as missing (the survey's default too).
MISSING_BELOW_DB = 40.0


@dataclass(frozen=True)
class SlotComparison:
    """Predicted attack levels of harmonics 1..n of one note in slots A and B, and their differences."""

    note: int
    freqs_a_hz: np.ndarray
    freqs_b_hz: np.ndarray
    levels_a_db: np.ndarray
    levels_b_db: np.ndarray
    level_a_db: float  # total (energy sum) of the harmonics, dBFS
    level_b_db: float
    centroid_a_hz: float  # sum f_k E_k / sum E_k over the harmonics
    centroid_b_hz: float
    only_a: tuple[int, ...]  # harmonics A has and B lacks (1 = the fundamental)
    only_b: tuple[int, ...]

    @property
    def level_change_db(self) -> float:
        """B relative to A."""
        return self.level_b_db - self.level_a_db

    @property
    def centroid_change_hz(self) -> float:
        return self.centroid_b_hz - self.centroid_a_hz

    def same(self) -> bool:
        return np.array_equal(self.levels_a_db, self.levels_b_db) and np.array_equal(self.freqs_a_hz,
                                                                                      self.freqs_b_hz)

    def summary(self, limit: int = 8) -> list[str]:
        """Three lines of text: level, centroid, and the harmonics one sound lacks."""
        if self.same():
            return ["slots A and B sound the same for this note (ctrl+y copies one into the other)", "", ""]

        def listed(ks: tuple[int, ...]) -> str:
            shown = " ".join(map(str, ks[:limit]))
            return (shown + (" ..." if len(ks) > limit else "")) or "none"

        return [f"level     B {self.level_change_db:+5.1f} dB   "
                f"(A {self.level_a_db:.1f}, B {self.level_b_db:.1f} dBFS)",
                f"centroid  B {self.centroid_change_hz:+5.0f} Hz   (A {self.centroid_a_hz:.0f}, "
                f"B {self.centroid_b_hz:.0f} Hz)",
                f"only in A: harmonics {listed(self.only_a)}   only in B: {listed(self.only_b)}"]


def _energy_terms(levels_db: np.ndarray, freqs_hz: np.ndarray) -> tuple[float, float, np.ndarray]:
    heard = levels_db > FLOOR_DB
    energy = np.where(heard, 10.0 ** (levels_db / 10.0), 0.0)
    total = float(energy.sum())
    if total <= 0:
        return FLOOR_DB, 0.0, np.zeros(levels_db.size, bool)
    present = heard & (levels_db >= levels_db[heard].max() - MISSING_BELOW_DB)
    return 10.0 * np.log10(total), float(np.dot(freqs_hz, energy) / total), present


def compare_slots(a: Settings, b: Settings, note: int, n: int, velocity: int = 100,
                  sample_rate_hz: float = 48000.0, place: Place | None = None) -> SlotComparison:
    """Predicted attack spectra of ``note`` (harmonics 1..n, at ``velocity``) in sounds ``a`` and ``b``;
    a fretted sound that has ``place`` is predicted there (the note ``note`` on its string and fret)."""
    freqs, levels, terms = [], [], []
    for s in (a, b):
        if place is not None and is_fretted(s) and place_fits(s, place):
            placed = placed_note(s, place.string, place.fret)
            f = mode_frequencies_hz(placed.f0_hz, placed.inharmonicity, n)
            lv = predicted_levels_at(s, place.string, place.fret, n, velocity, None, sample_rate_hz)
        else:
            f = harmonic_frequencies_hz(s, midi_note_to_hz(note, s.get("tuning.a4_hz")), n)
            lv = predicted_levels_db(s, note, n, velocity, None, sample_rate_hz)
        freqs.append(f)
        levels.append(lv)
        terms.append(_energy_terms(lv, f))
    (la, ca, pa), (lb, cb, pb) = terms
    k = np.arange(1, n + 1)
    return SlotComparison(note, freqs[0], freqs[1], levels[0], levels[1], la, lb, ca, cb,
                          tuple(int(x) for x in k[pa & ~pb]), tuple(int(x) for x in k[pb & ~pa]))
