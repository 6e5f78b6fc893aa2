"""Live harmonic bars: the loudest voice's level per harmonic, beside the model's prediction."""

from __future__ import annotations

from typing import Any

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.geometry import Region
from textual.strip import Strip
from textual.widget import Widget

from rtvoice.ui.guard import Guarded
from rtvoice.ui.widgets.cells import strip_of
from rtvoice.ui.widgets.levels import BOTTOM_DB, TOP_DB, axis_labels, heights, line_row, solid_row

AXIS = 4
COLUMNS_PER_HARMONIC = 2
AXIS_STYLE = Style(dim=True)
#: Each row takes one colour by its level, like a meter; live (█) and predicted (│) differ by
#: shape, so nothing depends on the colour, and a row costs two segments to draw.
LEVEL_STYLES = ((-12.0, Style(color="#e05040")), (-36.0, Style(color="#e0a040")),
                (-200.0, Style(color="#60b0a0")))


def row_style(row_top_db: float) -> Style:
    return next(style for floor, style in LEVEL_STYLES if row_top_db > floor)
NULL_MARK = "·"  # the model predicts nothing (below the scale) for this harmonic


class HarmonicBars(Guarded, Widget):
    """Two columns per harmonic: a solid bar (live) and a thin line (predicted at the attack)."""

    DEFAULT_CSS = """
    HarmonicBars { height: 1fr; min-height: 5; }
    """

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.live_db: np.ndarray = np.zeros(0)
        self.predicted_db: np.ndarray = np.zeros(0)
        self._strips: list[Strip] = []
        self._drawn_for: tuple[int, ...] = ()  # (width, height) the strips were drawn at; () before the first

    def harmonics_shown(self) -> int:
        """How many harmonics fit in the current width."""
        return max(1, (self.size.width - AXIS - 1) // COLUMNS_PER_HARMONIC)

    def show_levels(self, live_db: np.ndarray | None, predicted_db: np.ndarray | None) -> None:
        """New levels; only the rows whose picture changed are redrawn (most frames, few do)."""
        live = np.zeros(0) if live_db is None else np.asarray(live_db, dtype=float)
        pred = self.predicted_db if predicted_db is None else np.asarray(predicted_db, dtype=float)
        if _same(live, self.live_db) and _same(pred, self.predicted_db):
            return
        self.live_db, self.predicted_db = live, pred
        if self._drawn_for != (self.size.width, self.size.height):
            self.refresh()
            return
        old, new = self._strips, self._draw()
        self._strips = new
        changed = [y for y, (a, b) in enumerate(zip(old, new, strict=False)) if a.text != b.text]
        if len(old) != len(new):
            self.refresh()
        elif changed:
            first, last = changed[0], changed[-1]
            self.refresh(Region(0, first, self.size.width, last - first + 1))

    def render_line(self, y: int) -> Strip:
        key = (self.size.width, self.size.height)
        if key != self._drawn_for:
            self._strips = self._draw()
            self._drawn_for = key
        return self._strips[y] if y < len(self._strips) else Strip.blank(self.size.width)

    def rows_text(self) -> list[str]:
        """The picture as plain text, one string per row (what a screen reader or test sees)."""
        return [strip.text for strip in self._draw()]

    def _draw(self) -> list[Strip]:
        width = self.size.width
        rows = max(1, self.size.height - 1)
        n = self.harmonics_shown()
        live = _padded(self.live_db, n)
        pred = _padded(self.predicted_db, n)
        h_live, h_pred = heights(live, rows), heights(pred, rows)
        labels = axis_labels(rows, width=AXIS)
        # All rows at once: row r (from the top) shows what lies above 8 * (rows - 1 - r) eighths.
        above = 8 * np.arange(rows - 1, -1, -1)[:, None]
        chars = np.empty((rows, COLUMNS_PER_HARMONIC * n), dtype="<U1")
        chars[:, 0::2] = solid_row(h_live[None, :], above // 8)
        chars[:, 1::2] = line_row(h_pred[None, :], above // 8)
        bottom = chars[-1, 1::2]
        bottom[(pred <= BOTTOM_DB) & (bottom == " ")] = NULL_MARK
        strips = []
        room = max(0, width - AXIS - 1)
        for r, line in enumerate(chars):
            top_db = TOP_DB - (TOP_DB - BOTTOM_DB) * r / rows
            body = "".join(line.tolist())[:room].ljust(room)
            # Every glyph here is one cell wide, so the strip's width is known without measuring.
            segments = [Segment(labels[r] + "┤", AXIS_STYLE), Segment(body, row_style(top_db))]
            strips.append(Strip(segments, AXIS + 1 + room).crop(0, width))
        strips.append(strip_of([(_harmonic_axis(n), AXIS_STYLE)], width))
        return strips


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and np.array_equal(a, b)


def _padded(values: np.ndarray, n: int) -> np.ndarray:
    out = np.full(n, -np.inf)
    m = min(n, values.size)
    out[:m] = values[:m]
    return out


def _harmonic_axis(n: int) -> str:
    """'k' numbers under the bars: 1, then every fourth harmonic."""
    cells = [" "] * (AXIS + 1 + COLUMNS_PER_HARMONIC * n)
    cells[AXIS - 1] = "k"
    for k in [1, *range(4, n + 1, 4)]:
        label = str(k)
        start = AXIS + 1 + COLUMNS_PER_HARMONIC * (k - 1)
        end = start + len(label)
        if end <= len(cells) and all(c == " " for c in cells[start:end]):
            cells[start:end] = list(label)
    return "".join(cells)
