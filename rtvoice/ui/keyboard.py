"""Playing notes from the computer keyboard.

Our layout treats the four letter-and-digit rows as four strings tuned a fourth
apart, like the lower strings of a guitar, with each key one fret (semitone)
higher than the key to its left: the bottom row starts on E2, the next rows on
A2, D3 and G3. A terminal reports key presses only, never releases, so a key
plucks the string and the note rings out by itself; a separate key mutes all.
"""

from __future__ import annotations

from dataclasses import dataclass

#: Rows from low to high, each a string; the first key is the open string.
ROWS: tuple[tuple[str, int], ...] = (
    ("zxcvbnm,./", 40),  # E2
    ("asdfghjkl;", 45),  # A2
    ("qwertyuiop", 50),  # D3
    ("1234567890", 55),  # G3
)
OCTAVE_DOWN, OCTAVE_UP = "<", ">"
MIN_SHIFT, MAX_SHIFT = -3, 4
DEFAULT_VELOCITY = 90  # start quiet


def base_note(char: str) -> int | None:
    """MIDI note of ``char`` at no octave shift, or None if the key plays nothing."""
    for keys, open_note in ROWS:
        i = keys.find(char)
        if i >= 0 and char:
            return open_note + i
    return None


@dataclass
class KeyboardPlayer:
    """Maps key characters to notes, with an octave shift."""

    shift: int = 0
    velocity: int = DEFAULT_VELOCITY

    def note_for(self, char: str) -> int | None:
        note = base_note(char)
        if note is None:
            return None
        note += 12 * self.shift
        return note if 0 <= note <= 127 else None

    def octave(self, step: int) -> int:
        self.shift = max(MIN_SHIFT, min(MAX_SHIFT, self.shift + step))
        return self.shift


def layout_lines() -> list[str]:
    """The layout as text for the help screen: each row with its open string."""
    from rtvoice.ui.format import note_name

    lines = []
    for keys, open_note in reversed(ROWS):
        top = note_name(open_note + len(keys) - 1)
        lines.append(f"  {' '.join(keys)}   {note_name(open_note)} .. {top}")
    return lines
