"""Playing notes from the computer keyboard.

Our layout treats the four letter-and-digit rows as four strings tuned a fourth
apart, like the lower strings of a guitar, with each key one fret (semitone)
higher than the key to its left: the bottom row starts on E2, the next rows on
A2, D3 and G3. A terminal reports key presses only, never releases, so a key
plucks the string and the note rings out by itself; a separate key mutes all.

On a fretted instrument (``instrument.assign`` hand or channel) the rows are the
instrument's own strings: four neighbouring strings, the lowest of them on the bottom
row, each key one fret further from the nut (the first key the open string). A key
sends its note (the string's open note plus the fret) on MIDI channel string - 1, the
convention of one channel per string (common practice): under the channel rule that
string plays it, under the hand rule the engine chooses the string as for any note.
Two keys move the rows across the strings, the octave keys move them 12 frets along.
"""

from __future__ import annotations

from dataclasses import dataclass

from rtvoice.engine import Settings

#: Rows from low to high, each a string; the first key is the open string.
ROWS: tuple[tuple[str, int], ...] = (
    ("zxcvbnm,./", 40),  # E2
    ("asdfghjkl;", 45),  # A2
    ("qwertyuiop", 50),  # D3
    ("1234567890", 55),  # G3
)
OCTAVE_DOWN, OCTAVE_UP = "<", ">"
#: Fretted: the rows move to the lower-pitched strings (towards the bass) or the higher-pitched ones.
STRINGS_DOWN, STRINGS_UP = "-", "="
MIN_SHIFT, MAX_SHIFT = -3, 4
DEFAULT_VELOCITY = 90  # start quiet
FRET_SHIFT = 12  # the octave keys move the rows this many frets along the strings


def base_note(char: str) -> int | None:
    """MIDI note of ``char`` at no octave shift, or None if the key plays nothing."""
    for keys, open_note in ROWS:
        i = keys.find(char)
        if i >= 0 and char:
            return open_note + i
    return None


def key_position(char: str) -> tuple[int, int] | None:
    """(row from the bottom, key from the left) of ``char``, or None if the key plays nothing."""
    for row, (keys, _) in enumerate(ROWS):
        i = keys.find(char)
        if i >= 0 and char:
            return row, i
    return None


@dataclass(frozen=True)
class StringKey:
    """What a key plays on a fretted instrument: ``string`` (1 = the highest) at ``fret``, the
    ``note`` there and the MIDI ``channel`` (0-15) it is sent on."""

    string: int
    fret: int
    note: int
    channel: int


@dataclass
class KeyboardPlayer:
    """Maps key characters to notes, with an octave shift; on a fretted instrument to strings and
    frets, with the rows' lowest string (``bottom_string``, 0: the instrument's lowest) and the
    fret of their first keys (``first_fret``)."""

    shift: int = 0
    velocity: int = DEFAULT_VELOCITY
    bottom_string: int = 0
    first_fret: int = 0

    def note_for(self, char: str) -> int | None:
        note = base_note(char)
        if note is None:
            return None
        note += 12 * self.shift
        return note if 0 <= note <= 127 else None

    def octave(self, step: int) -> int:
        self.shift = max(MIN_SHIFT, min(MAX_SHIFT, self.shift + step))
        return self.shift

    # -- a fretted instrument -------------------------------------------------------------
    def row_strings(self, settings: Settings) -> list[int]:
        """The string each row plays, bottom row first (0: none, on an instrument with fewer
        strings than rows). The lowest string of the rows is held where every row has a string."""
        bottom = self._bottom(settings, self.bottom_string)
        return [s if s >= 1 else 0 for s in range(bottom, bottom - len(ROWS), -1)]

    def move_strings(self, settings: Settings, step: int) -> list[int]:
        """Move the rows ``step`` strings towards the higher-pitched strings (negative: the lower)."""
        self.bottom_string = self._bottom(settings, self._bottom(settings, self.bottom_string) - step)
        return self.row_strings(settings)

    @staticmethod
    def _bottom(settings: Settings, wanted: int) -> int:
        """The bottom row's string: ``wanted`` (0: the lowest string) held so that every row has a
        string where the instrument has as many as there are rows."""
        count = len(settings.strings)
        return max(min(count, len(ROWS)), min(count, wanted or count))

    def move_frets(self, settings: Settings, step: int) -> int:
        """Move the rows ``step`` x 12 frets along the strings, their first key held on the neck."""
        self.first_fret = max(0, min(self._last_first(settings), self.first_fret + FRET_SHIFT * step))
        return self.first_fret

    def first_fret_on(self, settings: Settings) -> int:
        """The fret of the rows' first keys on this neck (held on it when the neck has fewer frets now)."""
        return min(self.first_fret, self._last_first(settings))

    @staticmethod
    def _last_first(settings: Settings) -> int:
        frets = int(settings.get("instrument.frets"))
        return frets - frets % FRET_SHIFT

    def string_key(self, char: str, settings: Settings) -> StringKey | None:
        """What ``char`` plays on the instrument, or None if it plays nothing there (no key, no string
        on its row, or a fret past the neck's last: see :meth:`missing_fret`)."""
        at = key_position(char)
        if at is None:
            return None
        string = self.row_strings(settings)[at[0]]
        fret = self.first_fret_on(settings) + at[1]
        if string == 0 or fret > int(settings.get("instrument.frets")):
            return None
        note = int(settings.strings[string - 1].note) + fret
        return StringKey(string, fret, note, string - 1) if note <= 127 else None

    def missing_fret(self, char: str, settings: Settings) -> int | None:
        """The fret ``char`` would play past the neck's last one, else None."""
        at = key_position(char)
        fret = self.first_fret_on(settings) + at[1] if at is not None else -1
        return fret if fret > int(settings.get("instrument.frets")) else None

    def rows_words(self, settings: Settings) -> str:
        """``keys: strings 6-3, frets 0-9``: what the rows play now."""
        played = [s for s in self.row_strings(settings) if s]
        first = self.first_fret_on(settings)
        last_fret = min(first + len(ROWS[0][0]) - 1, int(settings.get("instrument.frets")))
        strings = f"string {played[0]}" if len(played) == 1 else f"strings {played[0]}-{played[-1]}"
        return f"keys: {strings}, frets {first}-{last_fret}"


def layout_lines() -> list[str]:
    """The layout as text for the help screen: each row with its open string."""
    from rtvoice.ui.format import note_name

    lines = []
    for keys, open_note in reversed(ROWS):
        top = note_name(open_note + len(keys) - 1)
        lines.append(f"  {' '.join(keys)}   {note_name(open_note)} .. {top}")
    return lines


def string_layout_lines(player: KeyboardPlayer, settings: Settings) -> list[str]:
    """The rows as they play ``settings``' strings now, top row first, for the help screen."""
    from rtvoice.ui.format import note_name

    lines = []
    frets = int(settings.get("instrument.frets"))
    for (keys, _), string in reversed(list(zip(ROWS, player.row_strings(settings), strict=True))):
        if not string:
            lines.append(f"  {' '.join(keys)}   (no string)")
            continue
        open_note = int(settings.strings[string - 1].note)
        first = player.first_fret_on(settings)
        last = min(first + len(keys) - 1, frets)
        lines.append(f"  {' '.join(keys)}   string {string} ({note_name(open_note)}), frets "
                     f"{first}..{last}, MIDI channel {string}")
    return lines
