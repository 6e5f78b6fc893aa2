"""Meters: callback load, xruns, voices, output peak, limiter, MIDI activity, ports."""

from __future__ import annotations

import math
import time

from rich.text import Text
from textual.widget import Widget

from rtvoice.ui.format import db_text
from rtvoice.ui.guard import Guarded

ACTIVE_S = 0.3  # a MIDI event lights the activity mark for this long
WARN_LOAD = 0.7


def load_percent(value: float) -> str:
    """Callback load as a share of the block period (the host reports a fraction)."""
    if value is None or not math.isfinite(value):
        return "  -"
    return f"{100.0 * value:3.0f}%"


class Meters(Guarded, Widget):
    """Three lines of numbers, each with its name, so nothing depends on colour: the live meters,
    the ports, and the rate with the MIDI-to-sound latency."""

    DEFAULT_CSS = """
    Meters { height: 3; }
    """

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.snapshot = None
        self._midi_count = 0
        self._midi_at = -1e9
        self._line = ("", "")
        self.facts = ""  # rate and MIDI-to-sound latency, set once the engine is ready

    def show_facts(self, text: str) -> None:
        """What stays the same while the engine runs: its rate and latency (second line)."""
        if text != self.facts:
            self.facts = text
            self._line = self._lines(time.monotonic())
            self.refresh()

    def show_snapshot(self, snap) -> None:
        now = time.monotonic()
        if snap is not None and snap.midi_events != self._midi_count:
            self._midi_count = snap.midi_events
            self._midi_at = now
        self.snapshot = snap
        lines = self._lines(now)
        if lines != self._line:
            self._line = lines
            self.refresh()

    def _lines(self, now: float) -> tuple[str, str]:
        s = self.snapshot
        if s is None:
            return ("waiting for the engine...", "")
        midi_mark = "◆" if now - self._midi_at < ACTIVE_S else "◇"
        first = (
            f"load {load_percent(s.load_median)} p99 {load_percent(s.load_p99)}  xruns {s.xruns}  "
            f"voices {s.voices:2d}  peak {db_text(s.peak_dbfs, 5)} dBFS  "
            f"limit -{abs(s.gain_reduction_db):.1f} dB  MIDI {midi_mark}{s.midi_events}"
        )
        ports = ", ".join(s.midi_ports) if s.midi_ports else "none"
        second = f"MIDI in: {ports}   audio out: {s.audio_port or 'none'}"
        return first, second

    def render(self) -> Text:
        first, second = self._line
        width = max(1, self.size.width)
        text = Text(no_wrap=True, overflow="ellipsis")
        s = self.snapshot
        hot = s is not None and (s.load_p99 or 0) >= WARN_LOAD
        # Each line is cut to the width here: a long port name must not wrap onto the next line.
        text.append(_fit(first, width), style="bold" if hot else "")
        text.append("\n")
        text.append(_fit(second, width), style="dim")
        text.append("\n")
        text.append(_fit(self.facts, width), style="dim")  # rate and latency: the same while the engine runs
        return text


def _fit(line: str, width: int) -> str:
    return line if len(line) <= width else line[: width - 1] + "…"
