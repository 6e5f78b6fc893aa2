"""What the engine tells whoever runs it: a learned mapping, a refused change, the values that moved.

The engine's controller router leaves these in ``Engine.messages`` from inside the audio
callback, so each is one small frozen record (no bigger than the dict it replaces) and they
are rare: a learn, a refused controller value, the moved values every few milliseconds while
a controller turns. A host forwards them (``rtvoice.host.messages`` re-exports them as part of
the engine link's protocol); an offline render reads them directly. They live here, not in the
host, because the flow goes engine -> host: the engine must not import the host.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True, slots=True)
class Learned:
    """Controller ``cc`` on MIDI channel ``channel`` (1-16) now drives parameter ``target``.

    ``entry`` is the controller-map entry the learn made (the preset's ``[[control]]`` form);
    ``entries`` the whole map after it, filled in by the host before the message leaves the
    engine process (empty inside the engine)."""

    target: str
    cc: int
    channel: int
    entry: dict[str, Any] = field(default_factory=dict)
    entries: tuple[dict[str, Any], ...] = ()


@dataclass(frozen=True, slots=True)
class Error:
    """Something the engine refused or failed at, as one line; ``trace`` holds a traceback, if any
    (the engine process writes it to its log and sends the line alone)."""

    text: str
    trace: str = ""


@dataclass(frozen=True, slots=True)
class Values:
    """Parameter values the controller map changed, {canonical dotted name: value}."""

    values: dict[str, Any]


#: Everything the engine itself leaves in ``Engine.messages``.
EngineEvent = Learned | Error | Values
