"""What the performer decides and the voice renderer carries out: one record per change to a voice.

The performer (:mod:`rtvoice.engine.performer`) reads MIDI and decides, in time order,
which voice starts, is released or faded and on which sample of the block; the voice
renderer (:mod:`rtvoice.engine.voice_renderer`) renders each voice up to its change
and applies it. These records are all that passes between the two halves.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum


class ChangeKind(Enum):
    """What a change does to its voice."""

    START = "start"  # set up anew for a note (amplitudes, frequencies, decay, weights)
    RELEASE = "release"  # the key is up (and no pedal holds it): the release decay from now on
    FADE = "fade"  # stolen, re-plucked or all sound off: a short fade to silence


@dataclass(frozen=True, slots=True)
class Excitation:
    """A note's own pluck, set by a per-note control (MPE): ``position`` and ``width`` as fractions of
    the open scale length (of the note's own length under the open rule), as the settings hold them."""

    position: float
    width: float


@dataclass(frozen=True, slots=True)
class NoteStart:
    """The note a START sets its voice up for.

    ``place`` is where it sounds (its MIDI note under the open rule, else its string and fret:
    :mod:`rtvoice.engine.instrument`). ``excitation`` is the note's own pluck when a per-note
    control (MPE) set one, else None (the sound's). ``fresh`` is True when the voice's slot was
    free: it starts from silence, with nothing to fade out.
    """

    channel: int  # MIDI channel 0-15
    note: int  # MIDI note number 0-127
    velocity: int  # 1-127
    place: int
    excitation: Excitation | None
    fresh: bool


@dataclass(frozen=True, slots=True)
class VoiceChange:
    """Voice ``slot`` changes at sample ``at`` of the block (0 .. block - 1): ``kind``, and for a
    START the note it starts (``start``; None for the other kinds)."""

    slot: int
    at: int
    kind: ChangeKind
    start: NoteStart | None = None


__all__ = ["ChangeKind", "Excitation", "NoteStart", "VoiceChange"]
