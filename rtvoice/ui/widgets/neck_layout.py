"""What the neck view shows and where it falls: millimetres from the saddle to text columns.

Pure geometry, no Textual: the view (:mod:`rtvoice.ui.widgets.neck_view`) draws what these
functions place, and the tests check the places against the 12-TET fret rule directly.

The saddle is on the left and the nut on the right, as the one-string view draws the string,
so in both views a mark moving right moves away from the saddle. Distances are measured along
the string from the saddle, in mm, and map linearly onto the columns from the saddle's column
(distance 0) to the nut's (the scale length). Fret n lies L 2^(-n/12) from the saddle
(:func:`rtvoice.physics.frets.speaking_length_mm`, the 12-TET fret rule, common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rtvoice.physics.frets import interpolate_across_strings, speaking_length_mm

MAX_STRINGS = 12
MAX_FRETS = 36
#: Frets with inlays, numbered on the ruler (common practice); the rest stay unnumbered.
INLAY_FRETS = (3, 5, 7, 9, 12, 15, 17, 19, 21, 24)
#: The order in which ruler labels claim room: a narrow view keeps the octave marks first.
LABEL_PRIORITY = (12, 24, 5, 7, 3, 9, 15, 17, 19, 21)
#: A hand spans four fret cells, one finger a fret (common practice); drawn only, not a model.
HAND_SPAN_FRETS = 4
SADDLE_LABEL, NUT_LABEL = "saddle", "nut"
PLUCK, HAND, PICKUP_PREFIX = "pluck", "hand", "pickup "
#: Width thresholds in columns: string numbers and note names, then string numbers, then nothing.
WIDE_COLUMNS, MEDIUM_COLUMNS = 64, 48
WIDE_LABEL_COLUMNS, MEDIUM_LABEL_COLUMNS = 7, 3
MIN_SPAN_COLUMNS = 8  # below this the view still draws, cropped, rather than fail


@dataclass(frozen=True)
class PickupPlace:
    """One pickup: its distance from the saddle under the lowest (bass) and the highest (treble)
    string, the same for a straight pickup, and the width of string it senses."""

    bass_mm: float
    treble_mm: float
    aperture_mm: float

    @property
    def slanted(self) -> bool:
        return self.bass_mm != self.treble_mm


@dataclass(frozen=True)
class SoundingNote:
    """A note sounding on ``string`` (1-based, 1 = highest) stopped at ``fret`` (0 = open)."""

    string: int
    fret: int
    level_db: float  # its level now (brightness of its mark), dB re full scale
    loudest: bool = False  # the voice the harmonic bars follow


@dataclass(frozen=True)
class NeckPicture:
    """Everything the neck view draws; the app builds a new one when anything changes.

    ``open_notes`` are MIDI note numbers, string 1 (the highest-pitched) first. ``selected`` names
    the element the keys move (see :func:`elements_of`). A sounding note on a string or fret the
    neck does not have is left out of the picture rather than refused: the engine may still be
    ringing a note from the instrument before."""

    scale_length_mm: float
    frets: int
    open_notes: tuple[int, ...]
    pickups: tuple[PickupPlace, ...] = ()
    pluck_mm: float = 0.0
    pluck_width_mm: float = 0.0
    hand_fret: float = 0.0
    sounding: tuple[SoundingNote, ...] = ()
    selected: str = PLUCK

    def __post_init__(self) -> None:
        if not (math.isfinite(self.scale_length_mm) and self.scale_length_mm > 0):
            raise ValueError(f"scale_length_mm = {self.scale_length_mm!r}: must be a finite number > 0")
        if not 0 <= self.frets <= MAX_FRETS:
            raise ValueError(f"frets = {self.frets!r}: must be a whole number from 0 to {MAX_FRETS}")
        if not 1 <= len(self.open_notes) <= MAX_STRINGS:
            raise ValueError(f"open_notes has {len(self.open_notes)} strings: must have 1 to {MAX_STRINGS}")
        if any(not 0 <= n <= 127 for n in self.open_notes):
            raise ValueError(f"open_notes = {self.open_notes!r}: MIDI notes must lie in 0..127")

    @property
    def string_count(self) -> int:
        return len(self.open_notes)


# -- elements the keys move -----------------------------------------------------------------
def pickup_element(index: int) -> str:
    """The element name of pickup ``index`` (0-based): "pickup 1" for the first."""
    return f"{PICKUP_PREFIX}{index + 1}"


def pickup_index(element: str) -> int | None:
    """The 0-based pickup index an element name stands for, None for the pluck or the hand."""
    if element.startswith(PICKUP_PREFIX) and element[len(PICKUP_PREFIX):].isdigit():
        return int(element[len(PICKUP_PREFIX):]) - 1
    return None


def elements_of(picture: NeckPicture) -> tuple[str, ...]:
    """The movable elements in tab order: the pluck, the hand, then each pickup."""
    return (PLUCK, HAND, *(pickup_element(i) for i in range(len(picture.pickups))))


# -- millimetres and columns ------------------------------------------------------------------
@dataclass(frozen=True)
class NeckLayout:
    """The view's columns: string labels, then the saddle, the string, the nut, one column for
    open-string marks."""

    width: int
    scale_length_mm: float
    label_columns: int
    saddle_column: int
    nut_column: int

    @property
    def open_column(self) -> int:
        """Just past the nut: where an open string's note is marked."""
        return self.nut_column + 1

    def column_of(self, distance_from_saddle_mm: float) -> int:
        """The column of a point ``distance_from_saddle_mm`` along the string, held on the neck."""
        fraction = min(max(distance_from_saddle_mm / self.scale_length_mm, 0.0), 1.0)
        return self.saddle_column + round(fraction * (self.nut_column - self.saddle_column))

    def distance_at(self, column: int) -> float:
        """The distance from the saddle in mm at the centre of ``column`` (held on the neck)."""
        held = min(max(column, self.saddle_column), self.nut_column)
        return (held - self.saddle_column) / (self.nut_column - self.saddle_column) * self.scale_length_mm


def neck_layout(width: int, scale_length_mm: float) -> NeckLayout:
    """The layout for a view ``width`` columns wide; narrow views drop the string labels."""
    labels = (WIDE_LABEL_COLUMNS if width >= WIDE_COLUMNS
              else MEDIUM_LABEL_COLUMNS if width >= MEDIUM_COLUMNS else 0)
    saddle = labels
    nut = max(saddle + MIN_SPAN_COLUMNS, width - 2)  # the last column is for open-string marks
    return NeckLayout(width, scale_length_mm, labels, saddle, nut)


def fret_distance_from_saddle_mm(scale_length_mm: float, fret: float) -> float:
    """Fret ``fret`` lies where the string stopped there speaks: L 2^(-n/12) from the saddle."""
    return speaking_length_mm(scale_length_mm, max(fret, 0.0))


def fret_columns(layout: NeckLayout, frets: int) -> tuple[int, ...]:
    """The column of every fret: index n is fret n, index 0 the nut. Near the saddle frets may
    share a column when the view is narrow."""
    return tuple(layout.column_of(fret_distance_from_saddle_mm(layout.scale_length_mm, n))
                 for n in range(frets + 1))


def note_column(layout: NeckLayout, fret: int, columns: tuple[int, ...] | None = None) -> int:
    """Where a note stopped at ``fret`` is marked: in the middle of the cell behind the fret (where
    the finger goes), on the fret itself when the cell is too narrow, past the nut when open.

    ``columns`` is :func:`fret_columns` for at least ``fret`` frets (computed when not given)."""
    if fret <= 0:
        return layout.open_column
    cols = columns if columns is not None and len(columns) > fret else fret_columns(layout, fret)
    gap = cols[fret - 1] - cols[fret]
    return cols[fret] + (gap // 2 if gap > 1 else 0)


def fret_at_column(layout: NeckLayout, column: int, frets: int,
                   columns: tuple[int, ...] | None = None) -> int | None:
    """The fret whose cell holds ``column``: the cell of fret n runs from fret n's column up to,
    not including, fret n-1's. 0 at the nut or past it; None on the body, beyond the last fret."""
    if column >= layout.nut_column:
        return 0
    cols = columns if columns is not None and len(columns) > frets else fret_columns(layout, frets)
    for n in range(1, frets + 1):
        if cols[n] <= column:
            return n
    return None


def fret_of_distance(scale_length_mm: float, distance_from_saddle_mm: float) -> float:
    """The fractional fret at which the string speaks ``distance_from_saddle_mm``: 12 log2(L / d)."""
    return 12.0 * math.log2(scale_length_mm / max(distance_from_saddle_mm, 1e-9))


def span_columns(layout: NeckLayout, centre_mm: float, width_mm: float) -> tuple[int, int]:
    """First and last column covered by ``width_mm`` of string centred ``centre_mm`` from the saddle."""
    half = max(width_mm, 0.0) / 2
    return layout.column_of(centre_mm - half), layout.column_of(centre_mm + half)


@dataclass(frozen=True)
class PickupCells:
    """Where a pickup crosses one string: its distance there, its centre and aperture columns."""

    string: int
    distance_mm: float
    column: int
    first_column: int
    last_column: int


def pickup_distances_mm(pickup: PickupPlace, string_count: int) -> np.ndarray:
    """The pickup's distance from the saddle under each string, string 1 first: linear across
    the strings from the treble end (string 1) to the bass end (the last string)."""
    strings = np.arange(1, string_count + 1)
    return np.atleast_1d(interpolate_across_strings(pickup.bass_mm, pickup.treble_mm, strings, string_count))


def pickup_cells(layout: NeckLayout, pickup: PickupPlace, string_count: int) -> tuple[PickupCells, ...]:
    """The pickup's cells on each string, string 1 first (a slanted pickup's move across them)."""
    out = []
    for i, d in enumerate(pickup_distances_mm(pickup, string_count)):
        first, last = span_columns(layout, float(d), pickup.aperture_mm)
        out.append(PickupCells(i + 1, float(d), layout.column_of(float(d)), first, last))
    return tuple(out)


def hand_columns(layout: NeckLayout, hand_fret: float, frets: int) -> tuple[int, int] | None:
    """First and last column of the hand's fret cells (fret h to h + 3, held on the neck), or
    None on a neck without frets."""
    if frets == 0:
        return None
    low = min(max(hand_fret, 0.0), float(frets))
    nut_side = max(low - 1.0, 0.0)  # the cell of fret h starts at fret h - 1
    saddle_side = min(low + HAND_SPAN_FRETS - 1, float(frets))
    scale = layout.scale_length_mm
    return (layout.column_of(fret_distance_from_saddle_mm(scale, saddle_side)),
            layout.column_of(fret_distance_from_saddle_mm(scale, nut_side)))


@dataclass(frozen=True)
class RulerLabel:
    """A word or number on the ruler row, starting at ``column``."""

    column: int
    text: str


def ruler_labels(layout: NeckLayout, frets: int) -> tuple[RulerLabel, ...]:
    """"saddle", "nut" and the inlay frets' numbers over their cells, each kept only when it
    leaves a blank column to its neighbours (in :data:`LABEL_PRIORITY` order, so a narrow view
    drops the less telling numbers first)."""
    cols = fret_columns(layout, frets)
    taken: list[tuple[int, int]] = []
    out: list[RulerLabel] = []

    def claim(start: int, text: str) -> None:
        end = start + len(text) - 1
        if start < 0 or end >= layout.width:
            return
        if all(end + 1 < a or start - 1 > b for a, b in taken):
            taken.append((start, end))
            out.append(RulerLabel(start, text))

    claim(layout.saddle_column, SADDLE_LABEL)
    claim(layout.nut_column - len(NUT_LABEL) + 1, NUT_LABEL)
    for n in LABEL_PRIORITY:
        if n <= frets:
            text = str(n)
            centre = note_column(layout, n, cols)
            claim(centre - (len(text) - 1) // 2, text)
    return tuple(sorted(out, key=lambda label: label.column))
