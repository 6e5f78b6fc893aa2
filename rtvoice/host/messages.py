"""Everything that crosses the engine link, as frozen records.

:class:`~rtvoice.host.link.EngineLink` sends the engine process *commands*; the engine
process sends back *messages*. Both travel over a multiprocessing pipe, so each is a plain
frozen dataclass of builtins and tuples (a sound travels as the Settings object it is), which
pickles as it is. Each side dispatches with ``match`` on the class; anything else, or a record
whose fields are not of their declared types (:func:`well_formed`), is counted and dropped, never
guessed at.

The engine's own events (:class:`Learned`, :class:`Error`, :class:`Values`) are defined in
:mod:`rtvoice.engine.events`, because the engine makes them inside the audio callback and must
not import the host; they are re-exported here as part of the protocol.
"""

from __future__ import annotations

import types
import typing
from dataclasses import dataclass, fields, is_dataclass
from typing import Any

from rtvoice.engine import Error, Learned, Settings, Values
from rtvoice.host.rates import Latency

__all__ = [
    "AllNotesOff", "Close", "Closed", "Command", "Controls", "Device", "Error", "Exited", "Fatal", "Learn",
    "Learned", "LoadSound", "Message", "MidiBytes", "Notice", "Ports", "Ready", "Respawn", "SetControls", "SetValue",
    "Values", "well_formed",
]


# -- commands: link -> engine process ------------------------------------------------------
@dataclass(frozen=True, slots=True)
class SetValue:
    """Set one parameter (canonical dotted name) to a value the link has already validated."""

    name: str
    value: Any


@dataclass(frozen=True, slots=True)
class LoadSound:
    """Play a whole sound; its controller map, when it has one, replaces the current map."""

    settings: Settings


@dataclass(frozen=True, slots=True)
class MidiBytes:
    """One channel-voice message, as if it came from a MIDI input (status 0x80..0xEF)."""

    status: int
    data1: int
    data2: int


@dataclass(frozen=True, slots=True)
class Learn:
    """Map the next controller moved to ``target``; None cancels learning."""

    target: str | None


@dataclass(frozen=True, slots=True)
class SetControls:
    """Replace the controller map (entries in the preset's ``[[control]]`` form, already checked)."""

    entries: tuple[dict[str, Any], ...]


@dataclass(frozen=True, slots=True)
class AllNotesOff:
    """Sustain off and all notes off on every channel."""


@dataclass(frozen=True, slots=True)
class Close:
    """Fade out, send the run's summary and exit."""


Command = SetValue | LoadSound | MidiBytes | Learn | SetControls | AllNotesOff | Close


# -- messages: engine process -> link ------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Ready:
    """The engine's audio runs: where it plays, what it listens to, how late it sounds."""

    audio_port: str  # the output as the user would name it
    audio_ports: tuple[str, ...]  # the JACK ports it registered, if on JACK
    midi_ports: tuple[str, ...]
    notes: tuple[str, ...]  # what it said at start-up (the rate it follows, inputs it could not open)
    rate_hz: int
    block_frames: int
    server_period_frames: int  # the JACK server's period, 0 when not on JACK
    lookahead_s: float  # the limiter's delay
    latency_s: float  # the output's own latency, as the audio library reports it
    pid: int
    cpu_wakeup: str  # what the CPU wake-up request got (rtvoice.host.cpu_wakeup)
    heap_frozen: int  # objects moved out of the collector's walk at start-up (rtvoice.host.heap)
    heap_walked: int  # objects a full collection still walks

    @property
    def latency(self) -> Latency:
        """MIDI-to-sound latency in its parts."""
        return Latency(1000.0 * self.block_frames / self.rate_hz, 1000.0 * self.latency_s,
                       1000.0 * self.lookahead_s)


@dataclass(frozen=True, slots=True)
class Controls:
    """The controller map now in use."""

    entries: tuple[dict[str, Any], ...]


@dataclass(frozen=True, slots=True)
class Device:
    """An audio or MIDI device came, went or came back; one line for the user."""

    text: str


@dataclass(frozen=True, slots=True)
class Ports:
    """The ports changed (a device came or went)."""

    audio_port: str
    midi_ports: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class Respawn:
    """The audio library is stuck on a lost server: this process ends; start a fresh one."""

    text: str


@dataclass(frozen=True, slots=True)
class Closed:
    """The engine stopped; ``summary`` holds the run's figures (seconds, load, xruns, ...)."""

    summary: dict[str, Any]


@dataclass(frozen=True, slots=True)
class Fatal:
    """The engine could not start, and why."""

    text: str


@dataclass(frozen=True, slots=True)
class Exited:
    """Made by the link itself when the engine process ended without saying goodbye."""

    text: str


Message = Ready | Controls | Values | Learned | Error | Device | Ports | Respawn | Closed | Fatal | Exited
#: What the link hands on to its user (the UI, the headless runner): the rest only updates the link.
Notice = Learned | Error | Device | Exited

_COMMANDS = typing.get_args(Command)
_MESSAGES = typing.get_args(Message)
_HINTS: dict[type, list[tuple[str, Any]]] = {}


def well_formed(obj: object, *, command: bool = False) -> bool:
    """True when ``obj`` is one of the protocol's records (a command when ``command``, else a
    message) and every field holds its declared type."""
    kinds = _COMMANDS if command else _MESSAGES
    kind = type(obj)
    # Every record is a dataclass; is_dataclass only tells the type checker so.
    if kind not in kinds or not is_dataclass(kind):
        return False
    hints = _HINTS.get(kind)
    if hints is None:
        declared = typing.get_type_hints(kind)
        hints = _HINTS[kind] = [(f.name, declared[f.name]) for f in fields(kind)]
    return all(_fits(getattr(obj, name, None), hint) for name, hint in hints)


def _fits(value: object, hint: Any) -> bool:
    if hint is Any:
        return True
    if hint is type(None):
        return value is None
    origin = typing.get_origin(hint)
    args = typing.get_args(hint)
    if origin in (typing.Union, types.UnionType):
        return any(_fits(value, a) for a in args)
    if origin is tuple:
        return isinstance(value, tuple) and all(_fits(v, args[0]) for v in value)
    if origin is dict:
        return isinstance(value, dict) and all(isinstance(k, str) for k in value)
    if hint is float:
        return isinstance(value, int | float) and not isinstance(value, bool)
    if hint is int:
        return isinstance(value, int) and not isinstance(value, bool)
    return isinstance(value, hint)
