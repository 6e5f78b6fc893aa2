"""The A/B view: both slots' predicted harmonics for one note side by side, and what differs."""

from __future__ import annotations

from typing import Any

from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from rtvoice.ui.compare import SlotComparison
from rtvoice.ui.guard import Guarded
from rtvoice.ui.widgets.bars import HarmonicBars


class CompareView(Guarded, Vertical):
    """Bars with slot A solid (█) and slot B as a line (│) per harmonic, then three lines of differences."""

    DEFAULT_CSS = """
    CompareView { height: 1fr; }
    CompareView > HarmonicBars { height: 1fr; min-height: 4; }
    CompareView > Static { height: 3; }
    """

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.bars = HarmonicBars(id="compare-bars")
        self.differences = Static("", id="compare-text")
        self.comparison: SlotComparison | None = None

    def compose(self) -> ComposeResult:
        yield self.bars
        yield self.differences

    def harmonics_shown(self) -> int:
        return self.bars.harmonics_shown()

    def show_comparison(self, comparison: SlotComparison) -> None:
        if comparison is self.comparison:
            return
        self.comparison = comparison
        self.bars.show_levels(comparison.levels_a_db, comparison.levels_b_db)
        self.differences.update("\n".join(comparison.summary()))

    @property
    def text(self) -> str:
        return "\n".join(self.comparison.summary()) if self.comparison else ""
