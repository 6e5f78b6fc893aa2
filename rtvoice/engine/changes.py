"""What the performer decides and the voice renderer carries out: one record per change to a voice.

The performer (:mod:`rtvoice.engine.performer`) reads MIDI and decides, in time order,
which voice starts, is released or faded and on which sample of the block; the voice
renderer (:mod:`rtvoice.engine.voice_renderer`) renders each voice up to its change
and applies it. These records are all that passes between the two halves.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

import numpy as np


class ChangeKind(Enum):
    """What a change does to its voice."""

    START = "start"  # set up anew for a note (amplitudes, frequencies, decay, weights)
    RELEASE = "release"  # the key is up (and no pedal holds it): the release decay from now on
    FADE = "fade"  # stolen, re-plucked or all sound off: a short fade to silence


@dataclass(frozen=True, slots=True)
class NoteStart:
    """The note a START sets its voice up for.

    ``initial`` holds the note's own initial mode amplitudes at full velocity when a
    per-note control (MPE) set its excitation, else None (the sound's). ``fresh`` is
    True when the voice's slot was free: it starts from silence, with nothing to fade out.
    """

    channel: int  # MIDI channel 0-15
    note: int  # MIDI note number 0-127
    velocity: int  # 1-127
    initial: np.ndarray | None
    fresh: bool


@dataclass(frozen=True, slots=True)
class VoiceChange:
    """Voice ``slot`` changes at sample ``at`` of the block (0 .. block - 1): ``kind``, and for a
    START the note it starts (``start``; None for the other kinds)."""

    slot: int
    at: int
    kind: ChangeKind
    start: NoteStart | None = None


__all__ = ["ChangeKind", "NoteStart", "VoiceChange"]
