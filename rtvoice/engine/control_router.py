"""Controllers to parameters inside the engine: MIDI control changes, channel pressure and MPE per-note
values, through the sound's controller map (:class:`~rtvoice.engine.controls.ControlMap`).

The engine owns one router, so a controller map acts the same wherever the engine runs: live in the
host, offline in ``rtvoice render``, in the soak and the survey's checks. The engine hands it every
controller it does not own itself (sustain, RPN, all-notes-off stay the engine's) in event order.
Changes are collected and applied at most every ``every_s`` seconds of the engine's own sample
clock, after a block, as one new Settings: live parameters (pickups, gain, electronics) then glide
on the ringing notes through the engine's own smoothing, so a controller sweep does not zipper; the
others act on the next note. Per-note MPE values set the excitation of each note as it starts. What
a host must hear of (a learned mapping, a refused change, the values that moved) goes into
``outbox`` as small frozen records (:mod:`rtvoice.engine.events`).
"""

from __future__ import annotations

from collections import deque
from typing import Any, Protocol

from rtvoice.engine.changes import Excitation
from rtvoice.engine.controls import ControlMap
from rtvoice.engine.distances import within_neck
from rtvoice.engine.events import EngineEvent, Error, Learned, Values
from rtvoice.engine.midi import ChannelState
from rtvoice.engine.settings import Settings, SettingsError


class Engine(Protocol):
    """What the router needs of the engine that owns it (the renderer imports this module, so the
    router names the engine by what it does rather than importing it)."""

    settings: Settings

    @property
    def channels(self) -> ChannelState: ...

    def apply_settings(self, settings: Settings) -> None: ...

APPLY_EVERY_S = 0.004


def _is_place(name: str) -> bool:
    """The pluck's or a pickup's place along the string (a controller may carry them to the neck)."""
    return name == "excitation.position" or (name.startswith("pickup.") and name.endswith(".position"))


class ControlRouter:
    def __init__(self, engine: Engine, controls: ControlMap, outbox: deque[EngineEvent] | None = None,
                 every_s: float = APPLY_EVERY_S):
        self.engine = engine
        self.controls = controls
        self.outbox: deque[EngineEvent] = outbox if outbox is not None else deque()
        self.every_s = every_s
        self.pending: dict[str, Any] = {}
        self._last = -1e9
        self._reported: set[str] = set()

    def _member(self, channel: int) -> bool:
        return self.engine.channels.zone_master(channel) is not None

    def on_cc(self, channel: int, cc: int, value: int) -> None:
        changes = self.controls.control_change(channel, cc, value, self._member(channel))
        if self.controls.learned is not None:
            entry, self.controls.learned = self.controls.learned, None
            self.outbox.append(Learned(entry["target"], entry["cc"], channel + 1, entry))
        for name, v in changes:
            self.pending[name] = v

    def on_pressure(self, channel: int, value01: float) -> None:
        for name, v in self.controls.pressure(channel, value01, self._member(channel)):
            self.pending[name] = v

    def note_excitation(self, channel: int) -> Excitation | None:
        """The pluck of a note starting on ``channel`` from its MPE per-note values, or None (the sound's)."""
        if not self._member(channel):
            return None
        values = self.controls.note_values(channel)
        if not values:
            return None
        s = self.engine.settings
        return Excitation(float(values.get("excitation.position", s.get("excitation.position"))),
                          float(values.get("excitation.width", s.get("excitation.width"))))

    def after_block(self, now_s: float) -> None:
        """Apply the collected changes when ``every_s`` has passed since the last time (``now_s``:
        the engine's sample clock, so a render offline moves exactly as the same MIDI does live)."""
        if self.pending and now_s - self._last >= self.every_s:
            self._last = now_s
            self.apply_pending()

    def apply_pending(self) -> None:
        engine = self.engine
        n_pickups = len(engine.settings.pickups)
        changes = {n: v for n, v in self.pending.items()
                   if not (n.startswith("pickup.") and int(n.split(".")[1]) >= n_pickups)}
        self.pending.clear()
        if not changes:
            return
        for name in [n for n in changes if _is_place(n)]:
            changes[name] = within_neck(engine.settings, name, float(changes[name]))
        try:
            new = engine.settings.with_values(changes, source="controller")
        except SettingsError as err:
            text = str(err)
            if text not in self._reported:
                self._reported.add(text)
                self.outbox.append(Error(text))
            return
        engine.apply_settings(new)
        self.outbox.append(Values(changes))
