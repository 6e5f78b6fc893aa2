"""Errors of the real-time host that a user can cause or fix (device names, ports, MIDI messages)."""

from __future__ import annotations

from typing import Any

from rtvoice.errors import UserError


class HostError(UserError, RuntimeError):
    """The host cannot start or run as asked; the message says why and what to do."""


class MidiMessageError(UserError, ValueError):
    """A MIDI message part out of its range: ``what`` (note, velocity, channel, status, data1, data2),
    ``value`` as given, ``allowed`` in words."""

    def __init__(self, what: str, value: Any, reason: str, allowed: str):
        self.what = what
        super().__init__(reason, key=what, value=value, allowed=allowed)
