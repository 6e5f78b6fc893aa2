"""The app's side of the engine link: calls that never raise into the UI, the conversion of
the engine's live mode levels into the terms of the prediction, and where the engine's voices
sound on a fretted instrument.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from rtvoice.engine import Settings, default_entries
from rtvoice.errors import UserError
from rtvoice.host.messages import Notice
from rtvoice.ui.fretting import LivePlaces
from rtvoice.ui.prediction import FLOOR_DB, electronics_gain, to_db

Report = Callable[[str], None]

#: The host publishes each mode's level |g s| after the output gain but before the
#: electronics filter (rtvoice/host/meters.py); the bars show live and predicted
#: levels both after the electronics, as they reach the output.


def live_output_db(settings: Settings, levels_db: np.ndarray, freqs_hz: np.ndarray) -> np.ndarray:
    """Live mode levels carried through the electronics response at each mode's frequency."""
    levels = np.asarray(levels_db, dtype=float)
    if levels.size == 0:
        return levels
    freqs = np.asarray(freqs_hz, dtype=float)[: levels.size]
    gain_db = to_db(electronics_gain(settings, np.maximum(freqs, 0.0)))
    out = levels + np.maximum(gain_db, FLOOR_DB)
    return np.where(freqs > 0, out, FLOOR_DB)


class EngineView:
    """Wraps an EngineLink: validation errors come back through ``report``, never as exceptions."""

    def __init__(self, link: Any):
        self.link = link
        self.places = LivePlaces()  # as of the last snapshot

    def snapshot(self):
        """The engine's latest meters; :attr:`places` is read with them."""
        snap = self.link.snapshot()
        self.places = LivePlaces.from_snapshot(snap)
        return snap

    def messages(self) -> list[Notice]:
        return list(self.link.poll_messages())

    def alive(self) -> bool:
        return bool(self.link.alive())

    def controls(self) -> list[dict]:
        try:
            return list(self.link.controls())
        except Exception:  # noqa: BLE001 - a link without controls shows none
            return []

    def engine_settings(self) -> Settings | None:
        return getattr(self.link, "settings", None)

    def moved_values(self, ui_settings: Settings) -> dict[str, Any]:
        """Values the engine changed on its own (a controller moved), as {name: value}.

        The UI passes every change of its own to the link at once, so any
        difference left is one the engine made.
        """
        theirs = self.engine_settings()
        if theirs is None or theirs is ui_settings:
            return {}
        if len(theirs.pickups) != len(ui_settings.pickups):
            return {}
        return {n: theirs.get(n) for n in theirs.differences(ui_settings) if n != "pickup"}

    def _call(self, report: Report, fn, *args) -> bool:
        try:
            fn(*args)
        except UserError as err:  # a refused value (SettingsError) or MIDI byte (MidiMessageError)
            report(str(err))
            return False
        return True

    def set_value(self, name: str, value: Any, report: Report) -> bool:
        return self._call(report, self.link.set_value, name, value)

    def load(self, settings: Settings, report: Report) -> bool:
        """Play a whole sound. A sound without a controller map of its own (None) means the
        default map, so the map a previous sound learned does not carry over."""
        if not self._call(report, self.link.load_settings, settings):
            return False
        if getattr(settings, "controls", ()) is None:
            return self._call(report, self.link.set_controls, default_entries())
        return True

    def note_on(self, note: int, velocity: int, report: Report, channel: int = 0) -> bool:
        """A note-on as from a MIDI input on ``channel`` (0-15)."""
        return self._call(report, self.link.note_on, note, velocity, channel)

    def all_notes_off(self) -> None:
        self.link.all_notes_off()

    def learn(self, name: str | None, report: Report) -> bool:
        return self._call(report, self.link.learn, name)

    def restart(self, report: Report) -> bool:
        try:
            self.link.restart()
        except Exception as err:  # noqa: BLE001 - HostError and friends: say why, keep the UI up
            report(f"error: the engine did not restart: {err}")
            return False
        return True

    def live_levels_db(self, settings: Settings, snap) -> np.ndarray:
        return live_output_db(settings, snap.mode_levels_db, snap.mode_freqs_hz)
