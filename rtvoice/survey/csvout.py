"""The survey as a CSV file: one row per grid point, one header line.

Columns and units are documented in the README, "Placement survey" > "The CSV columns"
(README.md#the-csv-columns). Rows run through notes, sensings, widths and pluck positions,
with the pickup position changing fastest. On a fretted instrument the columns gain
``string`` and ``fret`` after ``note`` (:data:`FRETTED_COLUMNS`); a survey of open strings
of their own writes :data:`COLUMNS` exactly as before.
The file is written to a temporary name and renamed, so a failed run leaves none.
"""

from __future__ import annotations

import contextlib
import csv
import itertools
import os
import tempfile
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np

from rtvoice.engine import PARAMS
from rtvoice.survey.result import SurveyResult

COLUMNS = (
    "note",
    "f1_hz",
    "sensing",
    "pickup_position",
    "pickup_position_mm",
    "pickup_width",
    "pickup_width_mm",
    "pluck_position",
    "pluck_position_mm",
    "centroid_hz",
    "centroid_ratio",
    "odd_even_db",
    "level_db",
    "electronics_db",
    "centroid_bare_hz",
    "missing",
)

#: The columns of a survey whose notes sound at strings and frets.
FRETTED_COLUMNS = (COLUMNS[0], "string", "fret", *COLUMNS[1:])


def columns(result: SurveyResult) -> tuple[str, ...]:
    """The header of ``result``'s CSV."""
    return FRETTED_COLUMNS if result.fretted else COLUMNS


_MAX_MODES = PARAMS["string.modes"].high
if _MAX_MODES is None:  # the schema bounds the mode count; the harmonic numbers below need that bound
    raise RuntimeError("schema parameter 'string.modes' has no upper bound")
_NUMBERS = np.array([str(k) for k in range(1, int(_MAX_MODES) + 1)], dtype=object)


def missing_text(flags: np.ndarray) -> str:
    """Harmonic numbers of the True entries, space-separated ("" when none)."""
    return " ".join(_NUMBERS[: flags.size][flags])


def rows(result: SurveyResult):
    """Each grid point as a list of strings in :func:`columns` order."""
    mm = result.scale_length_mm
    pickups = [(f"{x:.6g}", f"{x * mm:.2f}") for x in result.pickups]
    plucks = [(f"{p:.6g}", f"{p * mm:.2f}") for p in result.plucks]
    widths = [(f"{w:.6g}", f"{w * mm:.2f}") for w in result.widths]
    for i_n, i_s, i_w, i_p in itertools.product(
        range(len(result.notes)),
        range(len(result.sensings)),
        range(result.widths.size),
        range(result.plucks.size),
    ):
        head = [str(result.notes[i_n]), f"{result.f1_hz[i_n]:.3f}", result.sensings[i_s]]
        if result.fretted:
            place = result.place(i_n)
            head[1:1] = [str(place.string), str(place.fret)]
        at = (i_n, i_s, i_w, i_p)
        line = (
            result.centroid_hz[at],
            result.centroid_ratio[at],
            result.odd_even_db[at],
            result.level_db[at],
            result.electronics_db[at],
            result.centroid_bare_hz[at],
        )
        missing = result.missing[at][..., : int(result.mode_counts[i_n])]
        for i_x, (x, x_mm) in enumerate(pickups):
            c, r, oe, lv, el, cb = (a[i_x] for a in line)
            yield [
                *head,
                x,
                x_mm,
                *widths[i_w],
                *plucks[i_p],
                fixed_text(c, 2),
                fixed_text(r, 4),
                fixed_text(oe, 3),
                fixed_text(lv, 3),
                fixed_text(el, 3),
                fixed_text(cb, 2),
                missing_text(missing[i_x]),
            ]


def fixed_text(value: float, digits: int) -> str:
    """Fixed-point text; "inf", "-inf" or "nan" as Python writes them, and never "-0.000"."""
    text = f"{value:.{digits}f}"
    return text[1:] if text.startswith("-") and not text.strip("-0.") else text


def write_csv(path: Path | str, result: SurveyResult) -> None:
    """Write ``result`` to ``path`` atomically."""
    write_table(path, columns(result), rows(result))


def write_table(path: Path | str, header: Sequence[str], lines: Iterable[Sequence[str]]) -> None:
    """One header line and ``lines`` as CSV at ``path``, written to a temporary name and renamed."""
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(header)
            writer.writerows(lines)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
