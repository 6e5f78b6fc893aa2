"""What a survey returns: descriptor arrays over its grid, with the grid's axes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rtvoice.engine import Settings
from rtvoice.survey.inputs import Placement
from rtvoice.survey.placing import NotePlace


@dataclass(frozen=True)
class SurveyPlane:
    """Descriptors over pluck (rows) x pickup (columns) positions for one note, sensing and width.

    Arrays have shape (len(plucks), len(pickups)); ``missing`` adds one axis of
    ``mode_count`` harmonics (True = more than ``missing_below_db`` below the strongest).
    """

    note: int
    f1_hz: float
    sensing: str
    width: float
    pickups: np.ndarray
    plucks: np.ndarray
    reference: Placement
    scale_length_mm: float
    centroid_hz: np.ndarray
    centroid_ratio: np.ndarray
    odd_even_db: np.ndarray
    level_db: np.ndarray
    electronics_db: np.ndarray
    centroid_bare_hz: np.ndarray
    missing: np.ndarray
    place: NotePlace | None = None  # where the note sounds (string and fret on a fretted instrument)

    def missing_harmonics(self, i_pluck: int, i_pickup: int) -> list[int]:
        """Harmonic numbers missing at one point."""
        return [int(k) + 1 for k in np.flatnonzero(self.missing[i_pluck, i_pickup])]


DESCRIPTOR_FIELDS = (
    "centroid_hz",
    "centroid_ratio",
    "odd_even_db",
    "level_db",
    "electronics_db",
    "centroid_bare_hz",
)


@dataclass(frozen=True)
class SurveyResult:
    """Descriptors over notes x sensings x widths x plucks x pickups (that axis order)."""

    settings: Settings
    notes: tuple[int, ...]
    f1_hz: np.ndarray
    mode_counts: np.ndarray
    sensings: tuple[str, ...]
    widths: np.ndarray
    plucks: np.ndarray
    pickups: np.ndarray
    reference: Placement
    reference_sensing: str
    pickup_index: int
    window_s: float
    sample_rate_hz: float
    missing_below_db: float
    centroid_hz: np.ndarray
    centroid_ratio: np.ndarray
    odd_even_db: np.ndarray
    level_db: np.ndarray
    electronics_db: np.ndarray
    centroid_bare_hz: np.ndarray
    missing: np.ndarray  # (..., max mode count); False past a note's own count
    places: tuple[NotePlace, ...] = ()  # where each note sounds (empty: open strings of their own, as before)

    @property
    def fretted(self) -> bool:
        """True when the notes sound at strings and frets (positions fixed on the body)."""
        return any(p.fretted for p in self.places)

    def place(self, i_note: int) -> NotePlace:
        """Where note ``i_note`` sounds."""
        return self.places[i_note] if self.places else NotePlace(self.notes[i_note])

    @property
    def shape(self) -> tuple[int, ...]:
        return self.centroid_hz.shape

    @property
    def size(self) -> int:
        return int(self.centroid_hz.size)

    @property
    def scale_length_mm(self) -> float:
        return float(self.settings.get("string.scale_length_mm"))

    def plane(self, i_note: int = 0, i_sensing: int = 0, i_width: int = 0) -> SurveyPlane:
        at = (i_note, i_sensing, i_width)
        arrays = {name: getattr(self, name)[at] for name in DESCRIPTOR_FIELDS}
        return SurveyPlane(
            note=self.notes[i_note],
            f1_hz=float(self.f1_hz[i_note]),
            sensing=self.sensings[i_sensing],
            width=float(self.widths[i_width]),
            pickups=self.pickups,
            plucks=self.plucks,
            reference=self.reference,
            scale_length_mm=self.scale_length_mm,
            missing=self.missing[at][..., : int(self.mode_counts[i_note])],
            place=self.place(i_note),
            **arrays,
        )
