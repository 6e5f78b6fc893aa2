"""The survey view: a terminal map of tone over pickup and pluck positions, with a cursor
that moves the live sound's pickup and pluck to the point under it."""

from __future__ import annotations

import numpy as np
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from rtvoice.engine.settings import Settings
from rtvoice.survey import SurveyPlane, survey_grid

#: Shades from dark (low centroid) to bright (high centroid); shape, not colour, carries the value.
SHADES = " .:-=+*#%@"
PICKUP_COLUMNS = 48
PLUCK_ROWS = 12
DEFAULT_NOTE = 40


def map_grids(settings: Settings) -> tuple[np.ndarray, np.ndarray]:
    """Pickup positions (columns) and pluck positions (rows), fractions from the bridge."""
    return np.linspace(0.02, 0.5, PICKUP_COLUMNS), np.linspace(0.04, 0.5, PLUCK_ROWS)


def shade_rows(plane: SurveyPlane) -> list[str]:
    """One text row per pluck position: the centroid ratio as a shade, dark to bright."""
    c = np.log(plane.centroid_ratio)
    lo, hi = float(c.min()), float(c.max())
    idx = np.zeros(c.shape, int) if hi <= lo else np.round((c - lo) / (hi - lo) * (len(SHADES) - 1)).astype(int)
    return ["".join(SHADES[i] for i in row) for row in idx]


class SurveyScreen(ModalScreen[None]):
    """Map of brightness (spectral centroid) for the current sound and note."""

    DEFAULT_CSS = """
    SurveyScreen { align: center middle; }
    #survey-box { width: 64; max-width: 100%; height: auto; border: heavy $accent; padding: 0 1;
                  background: $panel; }
    """
    BINDINGS = [
        Binding("escape", "close", "close"),
        Binding("left", "move(-1, 0)", "pickup -", show=False),
        Binding("right", "move(1, 0)", "pickup +", show=False),
        Binding("up", "move(0, -1)", "pluck -", show=False),
        Binding("down", "move(0, 1)", "pluck +", show=False),
    ]

    def __init__(self, settings: Settings, note: int | None = None):
        super().__init__()
        self.note = DEFAULT_NOTE if note is None or note < 0 else int(note)
        self.pickups, self.plucks = map_grids(settings)
        self.plane = survey_grid(settings, self.note, self.pickups, self.plucks)
        self.rows = shade_rows(self.plane)
        self.col = int(np.argmin(np.abs(self.pickups - settings.get("pickup.0.position"))))
        self.row = int(np.argmin(np.abs(self.plucks - settings.get("excitation.position"))))
        self.scale_mm = settings.get("string.scale_length_mm")

    def compose(self) -> ComposeResult:
        with Vertical(id="survey-box"):
            yield Static(id="survey-map")
            yield Static(id="survey-readout")

    def on_mount(self) -> None:
        self._draw()

    def map_text(self) -> str:
        lines = [f"note {self.note}: pickup 0 across (bridge left), pluck down",
                 f"shade: centroid, '{SHADES[1]}' dull .. '{SHADES[-1]}' bright; [ ] cursor"]
        for r, text in enumerate(self.rows):
            cells = list(text)
            mark = "".join(cells)
            if r == self.row:
                mark = "".join(cells[: self.col]) + "[" + cells[self.col] + "]" + "".join(cells[self.col + 1:])
            else:
                mark = "".join(cells[: self.col]) + " " + cells[self.col] + " " + "".join(cells[self.col + 1:])
            lines.append(f"{self.plucks[r]:4.2f} |{mark}|")
        return "\n".join(lines)

    def readout_text(self) -> str:
        x, p = self.pickups[self.col], self.plucks[self.row]
        f = self.plane.centroid_hz[self.row, self.col]
        missing = self.plane.missing_harmonics(self.row, self.col)[:8]
        gone = " ".join(map(str, missing)) or "none"
        return (f"pickup {x:.3f} ({x * self.scale_mm:.0f} mm)  pluck {p:.3f} ({p * self.scale_mm:.0f} mm)\n"
                f"centroid {f:.0f} Hz  missing harmonics: {gone}\n"
                "arrows move (the live sound follows)  escape closes")

    def _draw(self) -> None:
        self.query_one("#survey-map", Static).update(self.map_text())
        self.query_one("#survey-readout", Static).update(self.readout_text())

    def action_move(self, dx: int, dy: int) -> None:
        self.col = min(max(self.col + dx, 0), len(self.pickups) - 1)
        self.row = min(max(self.row + dy, 0), len(self.plucks) - 1)
        change = getattr(self.app, "change", None)
        if change is not None:
            change("pickup.0.position", float(self.pickups[self.col]))
            change("excitation.position", float(self.plucks[self.row]))
        self._draw()

    def action_close(self) -> None:
        self.dismiss(None)
