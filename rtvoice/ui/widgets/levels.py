"""Turning dB values into rows of block characters (no colour needed to read them)."""

from __future__ import annotations

import numpy as np

TOP_DB = 0.0
BOTTOM_DB = -96.0
EIGHTHS = " ▁▂▃▄▅▆▇█"  # solid bar, one eighth of a row per step
HALF_LINE = "╷"  # thin line, lower half of a cell
FULL_LINE = "│"


def heights(values_db: np.ndarray, rows: int, top_db: float = TOP_DB,
            bottom_db: float = BOTTOM_DB) -> np.ndarray:
    """Height of each value in eighths of a row over the fixed dB range (0..rows*8)."""
    v = np.asarray(values_db, dtype=float)
    v = np.nan_to_num(v, nan=bottom_db, neginf=bottom_db, posinf=top_db)
    frac = (np.clip(v, bottom_db, top_db) - bottom_db) / (top_db - bottom_db)
    return np.round(frac * rows * 8).astype(int)


_EIGHTHS = np.array(list(EIGHTHS))
_LINES = np.array([" ", " ", HALF_LINE, HALF_LINE, HALF_LINE, HALF_LINE, FULL_LINE, FULL_LINE, FULL_LINE])


def solid_row(heights_eighths: np.ndarray, row_from_bottom: int | np.ndarray) -> np.ndarray:
    """:func:`solid_cell` for a whole row at once (an array of one-character strings); a column of
    row numbers (shape (rows, 1)) against a row of heights draws every row at once."""
    return _EIGHTHS[np.clip(heights_eighths - 8 * row_from_bottom, 0, 8)]


def line_row(heights_eighths: np.ndarray, row_from_bottom: int | np.ndarray) -> np.ndarray:
    """:func:`line_cell` for a whole row at once."""
    return _LINES[np.clip(heights_eighths - 8 * row_from_bottom, 0, 8)]


def solid_cell(height_eighths: int, row_from_bottom: int) -> str:
    """The block glyph for one cell of a solid bar."""
    filled = height_eighths - 8 * row_from_bottom
    if filled <= 0:
        return " "
    return EIGHTHS[min(filled, 8)]


def line_cell(height_eighths: int, row_from_bottom: int) -> str:
    """The glyph for one cell of a thin line bar (half-row resolution)."""
    filled = height_eighths - 8 * row_from_bottom
    if filled >= 6:
        return FULL_LINE
    if filled >= 2:
        return HALF_LINE
    return " "


LABEL_STEP_DB = 24.0


def axis_labels(rows: int, top_db: float = TOP_DB, bottom_db: float = BOTTOM_DB,
                width: int = 4) -> list[str]:
    """A dB label on the row holding each multiple of 24 dB (the row's top edge, rounded)."""
    labels = [" " * width] * rows
    per_row = (top_db - bottom_db) / rows
    level = top_db
    while level > bottom_db:
        r = int(round((top_db - level) / per_row))
        if r < rows and not labels[r].strip():
            labels[r] = f"{level:.0f}".rjust(width)
        level -= LABEL_STEP_DB
    return labels
