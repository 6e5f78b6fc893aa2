"""The neck map as a CSV file: one row per string and fret, one header line.

Columns and units are documented in the README, "Placement survey" > "Across the neck".
Rows run string by string (string 1, the highest, first) with the fret changing fastest.
The file is written to a temporary name and renamed, so a failed run leaves none.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from rtvoice.survey.csvout import fixed_text, missing_text, write_table
from rtvoice.survey.neck import NeckComparison, NeckMap
from rtvoice.survey.result import DESCRIPTOR_FIELDS

#: Digits after the point of each descriptor, as the pickup x pluck CSV writes them.
DIGITS = {
    "centroid_hz": 2,
    "centroid_ratio": 4,
    "odd_even_db": 3,
    "level_db": 3,
    "electronics_db": 3,
    "centroid_bare_hz": 2,
}
CELL_COLUMNS = ("string", "fret", "note", "f1_hz")
PLACEMENT_COLUMNS = ("pickup_mm", "pickup_fraction", "pluck_fraction", *DESCRIPTOR_FIELDS, "missing")
#: The columns of one placement's map.
NECK_COLUMNS = (*CELL_COLUMNS, *PLACEMENT_COLUMNS)
#: The columns of a comparison: the placement's, the other's (``against_``), the differences (``d_``,
#: this placement minus the other) and the lowest harmonics each loses against the other.
COMPARISON_COLUMNS = (
    *NECK_COLUMNS,
    *(f"against_{c}" for c in PLACEMENT_COLUMNS),
    *(f"d_{c}" for c in DESCRIPTOR_FIELDS),
    "lost",
    "gained",
)


def _placement(m: NeckMap, values: dict[str, np.ndarray], i: int, j: int) -> list[str]:
    count = int(m.mode_counts[i, j])
    return [
        f"{m.pickup_mm[i]:.2f}",
        f"{m.pickup_fraction[i, j]:.6g}",
        f"{m.pluck_fraction[i, j]:.6g}",
        *(fixed_text(values[name][i, j], DIGITS[name]) for name in DESCRIPTOR_FIELDS),
        missing_text(m.missing[i, j, :count]),
    ]


def _cells(m: NeckMap) -> Iterator[tuple[int, int, list[str]]]:
    for i, j in itertools.product(range(len(m.strings)), range(len(m.frets))):
        yield i, j, [str(m.strings[i]), str(m.frets[j]), str(int(m.notes[i, j])), f"{m.f1_hz[i, j]:.3f}"]


def neck_rows(m: NeckMap) -> Iterator[list[str]]:
    """Each cell of one placement's map in :data:`NECK_COLUMNS` order."""
    values = {name: m.value(name) for name in DESCRIPTOR_FIELDS}
    for i, j, head in _cells(m):
        yield [*head, *_placement(m, values, i, j)]


def comparison_rows(c: NeckComparison) -> Iterator[list[str]]:
    """Each cell of a comparison in :data:`COMPARISON_COLUMNS` order."""
    mine = {name: c.main.value(name) for name in DESCRIPTOR_FIELDS}
    theirs = {name: c.against_value(name) for name in DESCRIPTOR_FIELDS}
    diff = {name: c.difference(name) for name in DESCRIPTOR_FIELDS}
    for i, j, head in _cells(c.main):
        yield [
            *head,
            *_placement(c.main, mine, i, j),
            *_placement(c.against, theirs, i, j),
            *(fixed_text(diff[name][i, j], DIGITS[name]) for name in DESCRIPTOR_FIELDS),
            missing_text(c.lost[i, j]),
            missing_text(c.gained[i, j]),
        ]


def write_neck_csv(path: Path | str, neck: NeckMap | NeckComparison) -> None:
    """Write a neck map or a comparison to ``path`` atomically."""
    if isinstance(neck, NeckComparison):
        write_table(path, COMPARISON_COLUMNS, comparison_rows(neck))
    else:
        write_table(path, NECK_COLUMNS, neck_rows(neck))


__all__ = ["COMPARISON_COLUMNS", "NECK_COLUMNS", "comparison_rows", "neck_rows", "write_neck_csv"]
