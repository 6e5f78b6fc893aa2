"""Which string and fret play a note: the performer's half of the instrument.

A *place* is where a note sounds, one small integer the voice renderer keys its kept
rows by. Under the ``open`` rule every MIDI note is an open string of its own and its
place is the note number (0..127), as before strings and frets existed. Under the
``hand`` and ``channel`` rules a note sounds on one string at one fret, and its place
is ``OPEN_PLACES + (string - 1) * (MAX_FRETS + 1) + fret``: the same string and fret
keep the same place whatever the fret count, so a kept row never changes meaning.

Strings are numbered from 1, the highest-pitched (the common guitar convention).
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass
from enum import Enum

import numpy as np

from rtvoice.engine.settings import Settings

OPEN_PLACES = 128  # places 0..127: the open rule's one string per MIDI note
MAX_STRINGS = 12
MAX_FRETS = 36
MAX_PLACES = OPEN_PLACES + MAX_STRINGS * (MAX_FRETS + 1)


class AssignRule(Enum):
    """How a note finds its string (``instrument.assign``)."""

    OPEN = "open"  # every note an open string of its own length (positions: fractions of it)
    HAND = "hand"  # the string on which the note falls closest to the hand's fret, a silent one first
    CHANNEL = "channel"  # MIDI channel n plays string n (one channel per string, common practice)


@dataclass(frozen=True, slots=True)
class Placement:
    """Where a note sounds: its ``place`` (see the module's docstring), and for a fretted
    instrument its ``string`` (1 = highest) and ``fret`` (0 = open); 0 and -1 under the open rule."""

    note: int
    place: int
    string: int = 0
    fret: int = -1


def fretted_place(string: int, fret: int) -> int:
    """The place of ``string`` (1-based) stopped at ``fret``."""
    return OPEN_PLACES + (string - 1) * (MAX_FRETS + 1) + fret


def string_and_fret(place: int) -> tuple[int, int]:
    """(string, fret) of a fretted place; (0, -1) for an open-rule place."""
    if place < OPEN_PLACES:
        return 0, -1
    string, fret = divmod(place - OPEN_PLACES, MAX_FRETS + 1)
    return string + 1, fret


def strings_and_frets(places: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(string, fret) of each fretted place: :func:`string_and_fret`'s arithmetic over an array (an
    open-rule place gives a string below 1: see :func:`strings_of`)."""
    string0, fret = np.divmod(np.asarray(places, dtype=int) - OPEN_PLACES, MAX_FRETS + 1)
    return string0 + 1, fret


def strings_of(places: np.ndarray) -> np.ndarray:
    """The string of each place (as :func:`string_and_fret`, over an array; 0 for open-rule places)."""
    return np.where(places >= OPEN_PLACES, strings_and_frets(places)[0], 0)


@dataclass(frozen=True)
class Instrument:
    """The strings a performer can play: the rule, the open notes (string 1 first), the fret count
    and the fretting hand's fret (a float: a controller moves it smoothly)."""

    rule: AssignRule
    open_notes: tuple[int, ...]
    frets: int
    hand_fret: float

    @classmethod
    def from_settings(cls, settings: Settings) -> Instrument:
        return cls(
            rule=AssignRule(settings.get("instrument.assign")),
            open_notes=tuple(int(s.note) for s in settings.strings),
            frets=int(settings.get("instrument.frets")),
            hand_fret=float(settings.get("hand.fret")),
        )

    @property
    def fretted(self) -> bool:
        """True when notes sound on strings and frets (positions fixed in space)."""
        return self.rule is not AssignRule.OPEN

    @property
    def place_count(self) -> int:
        """How many places a fretted instrument's notes can sound at (every string at every fret); 0 open."""
        return len(self.open_notes) * (self.frets + 1) if self.fretted else 0

    def on_string(self, note: int, string: int) -> Placement | None:
        """``note`` played on ``string``, or None when that string cannot play it (below its open
        note, above its last fret, or no such string)."""
        if not 1 <= string <= len(self.open_notes):
            return None
        fret = note - self.open_notes[string - 1]
        if not 0 <= fret <= self.frets:
            return None
        return Placement(note, fretted_place(string, fret), string, fret)

    def choose(self, note: int, channel: int, sounding: Collection[int], by_hand: bool = False) -> Placement | None:
        """Where ``note`` on MIDI ``channel`` (0-15) sounds, or None when no string can play it.

        ``sounding``: strings with a voice that is not fading (the hand rule prefers the others).
        ``by_hand``: use the hand rule whatever the instrument's rule (an MPE zone's member channel,
        which says nothing about strings).
        """
        if self.rule is AssignRule.OPEN:
            return Placement(note, note)
        if self.rule is AssignRule.CHANNEL and not by_hand:
            return self.on_string(note, channel + 1)
        best: tuple[tuple[bool, float, int], Placement] | None = None
        for string in range(1, len(self.open_notes) + 1):
            placed = self.on_string(note, string)
            if placed is None:
                continue
            # A silent string first; then the fret nearest the hand; then the lower fret (it rings longer).
            key = (string in sounding, abs(placed.fret - self.hand_fret), placed.fret)
            if best is None or key < best[0]:
                best = (key, placed)
        return None if best is None else best[1]


__all__ = ["MAX_PLACES", "OPEN_PLACES", "AssignRule", "Instrument", "Placement", "fretted_place", "string_and_fret",
           "strings_and_frets", "strings_of"]
