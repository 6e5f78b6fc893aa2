"""The survey view: a terminal map of tone over pickup and pluck positions, with a cursor
that moves the live sound's pickup and pluck to the point under it.

When the sound has a pluck shape (``excitation.shape``), the pluck position has no effect:
the map then spans pickup positions only, in one row, and says so.
"""

from __future__ import annotations

import numpy as np
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Footer, Static

from rtvoice.engine import Settings, within_neck
from rtvoice.survey import SurveyPlane, survey_grid
from rtvoice.ui.format import note_name
from rtvoice.ui.guard import Guarded

#: Shades from dark (low centroid) to bright (high centroid); shape, not colour, carries the value.
SHADES = " .:-=+*#%@"
PICKUP_COLUMNS = 48
PLUCK_ROWS = 12
DEFAULT_NOTE = 40
PICKUP_SPAN = (0.02, 0.5)  # fractions of the string from the bridge (a fretted neck ends them sooner)
PLUCK_SPAN = (0.04, 0.5)
ROW_LABEL = 4  # characters of the row labels (" 120", mm) before the map's left edge


def _grid_through(span: tuple[float, float], count: int, value: float) -> np.ndarray:
    """``count`` evenly spaced positions over ``span`` with ``value`` among them exactly: the
    cursor sits at the sound's true place, not at the nearest grid point."""
    grid = np.linspace(span[0], span[1], count)
    if span[0] <= value <= span[1]:
        grid[int(np.argmin(np.abs(grid - value)))] = value
        return grid
    return np.sort(np.append(grid, value))


def pluck_is_free(settings: Settings) -> bool:
    """False when a pluck shape replaces the triangle, so the pluck position changes nothing."""
    return not settings.get("excitation.shape")


def map_grids(settings: Settings) -> tuple[np.ndarray, np.ndarray]:
    """Pickup positions (columns) and pluck positions (rows), fractions from the bridge: up to the
    middle of the string, or on a fretted instrument to 1 mm short of its last fret (where the sound
    can take them).

    Each grid holds the sound's own value; with a pluck shape the pluck grid is that one value."""
    pickup_span = (PICKUP_SPAN[0], within_neck(settings, "pickup.0.position", PICKUP_SPAN[1]))
    pluck_span = (PLUCK_SPAN[0], within_neck(settings, "excitation.position", PLUCK_SPAN[1]))
    pickups = _grid_through(pickup_span, PICKUP_COLUMNS, float(settings.get("pickup.0.position")))
    pluck = float(settings.get("excitation.position"))
    plucks = _grid_through(pluck_span, PLUCK_ROWS, pluck) if pluck_is_free(settings) else np.array([pluck])
    return pickups, plucks


def shade_rows(plane: SurveyPlane) -> list[str]:
    """One text row per pluck position: the centroid ratio as a shade, dark to bright."""
    c = np.log(plane.centroid_ratio)
    lo, hi = float(c.min()), float(c.max())
    idx = np.zeros(c.shape, int) if hi <= lo else np.round((c - lo) / (hi - lo) * (len(SHADES) - 1)).astype(int)
    return ["".join(SHADES[i] for i in row) for row in idx]


def axis_lines(pickups: np.ndarray, cursor: int, scale_mm: float) -> list[str]:
    """Tick marks and labels in mm from the bridge under the map's columns (the cursor's column
    is three characters wide, every other one)."""
    def at(col: int) -> int:
        return ROW_LABEL + 2 + col + (1 if col == cursor else 0) + (2 if col > cursor else 0)

    width = at(len(pickups) - 1) + 3
    ticks, labels = [" "] * width, [" "] * width
    for col in np.linspace(0, len(pickups) - 1, 4).round().astype(int):
        ticks[at(int(col))] = "^"
        text = f"{pickups[col] * scale_mm:.0f}"
        start = min(max(at(int(col)) - len(text) // 2, 0), width - len(text))
        labels[start:start + len(text)] = list(text)
    return ["".join(ticks).rstrip(), "".join(labels).rstrip() + " mm from the bridge"]


class SurveyScreen(Guarded, ModalScreen[None]):
    """Map of brightness (spectral centroid) for the current sound and note."""

    DEFAULT_CSS = """
    SurveyScreen { align: center middle; }
    #survey-box { width: 86; max-width: 100%; height: auto; border: heavy $accent; padding: 0 1;
                  background: $panel; }
    """
    BINDINGS = [
        Binding("escape", "close", "close"),
        Binding("left", "move(-1, 0)", "pickup ←", key_display="←"),
        Binding("right", "move(1, 0)", "pickup →", key_display="→"),
        Binding("up", "move(0, -1)", "pluck ↑", key_display="↑"),
        Binding("down", "move(0, 1)", "pluck ↓", key_display="↓"),
    ]

    def __init__(self, settings: Settings, note: int | None = None):
        super().__init__()
        self.note = DEFAULT_NOTE if note is None or note < 0 else int(note)
        self.pluck_free = pluck_is_free(settings)
        self.pickups, self.plucks = map_grids(settings)
        self.plane = survey_grid(settings, self.note, self.pickups, self.plucks)
        self.rows = shade_rows(self.plane)
        self.col = int(np.argmin(np.abs(self.pickups - settings.get("pickup.0.position"))))
        self.row = int(np.argmin(np.abs(self.plucks - settings.get("excitation.position"))))
        self.scale_mm = float(settings.get("string.scale_length_mm"))

    def compose(self) -> ComposeResult:
        with Vertical(id="survey-box"):
            yield Static(id="survey-map")
            yield Static(id="survey-readout")
        yield Footer()  # this map's keys, not the main screen's

    def on_mount(self) -> None:
        self._draw()

    def map_text(self) -> str:
        down = ("pluck (mm from the bridge) down" if self.pluck_free
                else "one row: a pluck shape is set, only the pickup moves")
        lines = [f"note {note_name(self.note)}: pickup 1 across, bridge left; {down}",
                 f"shade: centroid, '{SHADES[1]}' dull .. '{SHADES[-1]}' bright; [ ] cursor"]
        for r, text in enumerate(self.rows):
            left, right = (" ", " ") if r != self.row else ("[", "]")
            cells = list(text)
            cells[self.col] = f"{left}{text[self.col]}{right}"
            label = f"{self.plucks[r] * self.scale_mm:4.0f}" if self.pluck_free else "    "
            lines.append(f"{label} |{''.join(cells)}|")
        lines += axis_lines(self.pickups, self.col, self.scale_mm)
        return "\n".join(lines)

    def readout_text(self) -> str:
        x, p = self.pickups[self.col], self.plucks[self.row]
        f = self.plane.centroid_hz[self.row, self.col]
        missing = self.plane.missing_harmonics(self.row, self.col)[:8]
        gone = " ".join(map(str, missing)) or "none"
        pluck = (f"pluck {p * self.scale_mm:.0f} mm ({p:.3f})" if self.pluck_free
                 else "pluck: the shape's own")
        keys = "←/→ pickup, ↑/↓ pluck" if self.pluck_free else "←/→ pickup"
        return (f"pickup 1 {x * self.scale_mm:.0f} mm ({x:.3f})  {pluck}\n"
                f"centroid {f:.0f} Hz  missing harmonics: {gone}\n"
                f"{keys} (the live sound follows)  escape closes")

    def _draw(self) -> None:
        self.query_one("#survey-map", Static).update(self.map_text())
        self.query_one("#survey-readout", Static).update(self.readout_text())

    def action_move(self, dx: int, dy: int) -> None:
        col = min(max(self.col + dx, 0), len(self.pickups) - 1)
        row = min(max(self.row + dy, 0), len(self.plucks) - 1)
        change = getattr(self.app, "change", None)
        if change is not None:
            if col != self.col:
                change("pickup.0.position", float(self.pickups[col]))
            if row != self.row and self.pluck_free:
                change("excitation.position", float(self.plucks[row]))
        self.col, self.row = col, row
        self._draw()

    def action_close(self) -> None:
        self.dismiss(None)
