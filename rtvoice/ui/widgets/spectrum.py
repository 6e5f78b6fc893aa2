"""The measured spectrum of the output, on a log-frequency axis, with the harmonics marked."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.widget import Widget

from rtvoice.ui.guard import Guarded
from rtvoice.ui.widgets.levels import axis_labels, heights, solid_cell

AXIS = 4
LOW_HZ = 20.0
SPECTRUM_STYLE = "#a0c870"
MARK = "^"  # a harmonic of the loudest voice lies under this column
FREQ_TICKS_HZ = (50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000)


def column_edges_hz(columns: int, high_hz: float, low_hz: float = LOW_HZ) -> np.ndarray:
    """Log-spaced edges of ``columns`` frequency bands from ``low_hz`` to ``high_hz``."""
    return np.geomspace(low_hz, max(high_hz, low_hz * 2), columns + 1)


def columns_from_bins(spectrum_db: np.ndarray, bin_hz: float, edges_hz: np.ndarray) -> np.ndarray:
    """Loudest bin in each band; a band narrower than a bin takes the bin at its centre."""
    spec = np.asarray(spectrum_db, dtype=float)
    if spec.size == 0 or bin_hz <= 0:
        return np.full(edges_hz.size - 1, -np.inf)
    lo = np.ceil(edges_hz[:-1] / bin_hz).astype(int)
    hi = np.floor(edges_hz[1:] / bin_hz).astype(int)
    centre = np.round(np.sqrt(edges_hz[:-1] * edges_hz[1:]) / bin_hz).astype(int)
    out = np.full(edges_hz.size - 1, -np.inf)
    for c in range(out.size):
        a, b = (lo[c], hi[c]) if hi[c] >= lo[c] else (centre[c], centre[c])
        a, b = max(a, 0), min(b, spec.size - 1)
        if a <= b:
            out[c] = spec[a:b + 1].max()
    return out


class SpectrumView(Guarded, Widget):
    """Output spectrum as solid bars; a row of marks shows where the harmonics fall."""

    DEFAULT_CSS = """
    SpectrumView { height: 1fr; min-height: 5; }
    """

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.spectrum_db = np.zeros(0)
        self.bin_hz = 0.0
        self.harmonics_hz = np.zeros(0)
        self.high_hz = 24000.0

    def show_spectrum(self, spectrum_db, bin_hz: float, harmonics_hz,
                      high_hz: float | None = None) -> None:
        spec = np.zeros(0) if spectrum_db is None else np.asarray(spectrum_db, dtype=float)
        harm = np.zeros(0) if harmonics_hz is None else np.asarray(harmonics_hz, dtype=float)
        if high_hz is None:
            high_hz = bin_hz * max(spec.size - 1, 1) if spec.size else self.high_hz
        if (spec.shape == self.spectrum_db.shape and np.array_equal(spec, self.spectrum_db)
                and np.array_equal(harm, self.harmonics_hz) and bin_hz == self.bin_hz):
            return
        self.spectrum_db, self.bin_hz, self.harmonics_hz = spec, float(bin_hz), harm
        self.high_hz = high_hz
        if self.display:
            self.refresh()

    def render(self) -> Text:
        rows = max(1, self.size.height - 2)
        columns = max(1, self.size.width - AXIS - 1)
        edges = column_edges_hz(columns, min(self.high_hz, 20000.0))
        levels = columns_from_bins(self.spectrum_db, self.bin_hz, edges)
        h = heights(levels, rows)
        labels = axis_labels(rows, width=AXIS)
        text = Text(no_wrap=True, overflow="crop")
        for r in range(rows):
            from_bottom = rows - 1 - r
            text.append(labels[r] + "┤", style="dim")
            text.append("".join(solid_cell(int(x), from_bottom) for x in h), style=SPECTRUM_STYLE)
            text.append("\n")
        text.append(" " * (AXIS + 1) + _marks(self.harmonics_hz, edges) + "\n", style="bold")
        text.append(" " * (AXIS + 1) + _ticks(edges), style="dim")
        return text


def _column_of(freq_hz: np.ndarray, edges: np.ndarray) -> np.ndarray:
    return np.searchsorted(edges, freq_hz, side="right") - 1


def _marks(harmonics_hz: np.ndarray, edges: np.ndarray) -> str:
    cells = [" "] * (edges.size - 1)
    if harmonics_hz.size:
        inside = harmonics_hz[(harmonics_hz >= edges[0]) & (harmonics_hz < edges[-1])]
        for c in _column_of(inside, edges):
            cells[int(c)] = MARK
    return "".join(cells)


def _ticks(edges: np.ndarray) -> str:
    cells = [" "] * (edges.size - 1)
    for f in FREQ_TICKS_HZ:
        if not edges[0] <= f < edges[-1]:
            continue
        label = f"{f // 1000}k" if f >= 1000 else str(f)
        c = int(_column_of(np.array([f]), edges)[0])
        end = c + len(label)
        if end <= len(cells) and all(x == " " for x in cells[max(0, c - 1):end + 1]):
            cells[c:end] = list(label)
    return "".join(cells)
