"""Lengths and note names as people type them: ``40mm``, ``4cm``, ``1.5in``; ``E2``, ``F#3``, ``Bb1``.

Pure functions of text, shared by the settings, presets, survey grids and the
command options. Errors are :class:`ValueError` whose message is one line saying
what was typed and what is allowed; each caller adds its key and source through
its own error class (SettingsError, SurveyError, argparse's type errors).

Inches are the international inch, exactly 25.4 mm (common practice since the
international yard and pound agreement of 1959). Note names follow scientific
pitch notation with MIDI note 60 = C4 and 69 = A4 (the common convention beside
the MIDI 1.0 specification's note numbers), so C-1 = 0 and G9 = 127.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from fractions import Fraction

#: Millimetres per unit a length may be typed in.
MM_PER_UNIT: dict[str, float] = {"mm": 1.0, "cm": 10.0, "in": 25.4}
#: The same, exactly (the inch is 25.4 mm by definition): a typed length is divided by the scale
#: as an exact rational and rounded once, so "129.6mm" of a 648 mm scale is exactly the float 0.2.
_EXACT_MM_PER_UNIT = {"mm": Fraction(1), "cm": Fraction(10), "in": Fraction(254, 10)}
LENGTH_EXAMPLES = "40mm, 4cm or 1.5in"

MIDI_NOTE_LOW, MIDI_NOTE_HIGH = 0, 127
NOTE_NAMES = ("C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B")
_STEPS = {"c": 0, "d": 2, "e": 4, "f": 5, "g": 7, "a": 9, "b": 11}
_ACCIDENTALS = {"": 0, "#": 1, "\u266f": 1, "b": -1, "\u266d": -1}
# Letter, at most one accidental, octave (C-1 is MIDI 0). A lower-case "b" after a letter is a flat.
_NOTE = re.compile(r"^([A-Ga-g])([#b\u266f\u266d]?)(-?\d{1,2})$")
_LENGTH = re.compile(r"^(.*?)\s*(mm|cm|in)$", re.IGNORECASE)


@dataclass(frozen=True)
class Length:
    """A length as typed: the number, its unit, and the same in millimetres."""

    number: float
    unit: str
    decimal: str = field(default="", compare=False)  # the number as typed, read exactly (see fraction_of_string)

    @property
    def mm(self) -> float:
        return self.number * MM_PER_UNIT[self.unit]

    def text(self) -> str:
        return f"{self.number:g} {self.unit}"


def split_unit(text: str) -> tuple[str, str | None]:
    """(number text, unit) of ``text``; unit is None when no length unit ends it."""
    text = str(text).strip()
    m = _LENGTH.match(text)
    if not m:
        return text, None
    return m.group(1).strip(), m.group(2).lower()


def parse_length(text: str) -> Length:
    """A length with its unit (``40mm``, ``4 cm``, ``1.5in``); ValueError without a unit or number."""
    number_text, unit = split_unit(text)
    if unit is None:
        raise ValueError(f"expected a length like {LENGTH_EXAMPLES}, got {str(text)!r}")
    return Length(_finite(number_text, text), unit, number_text)


def parse_length_mm(text: str) -> float:
    """Millimetres of a length typed with its unit: ``parse_length_mm("1.5in") == 38.1``."""
    return parse_length(text).mm


def in_unit(mm: float, unit: str) -> float:
    """``mm`` millimetres expressed in ``unit``."""
    return mm / MM_PER_UNIT[unit]


def fraction_of_string(length: Length, low: float, high: float, scale_mm: float) -> float:
    """``length`` as a fraction of a ``scale_mm`` string, kept within [low, high].

    Out of range, the ValueError says so in the unit the length was typed in:
    ``700 mm is out of range: beyond the 648 mm string (allowed 3.24 .. 644.76 mm)``.
    """
    low_mm, high_mm = low * scale_mm, high * scale_mm
    slack_mm = 1e-9 * scale_mm  # a bound typed as shown is allowed despite rounding
    if not low_mm - slack_mm <= length.mm <= high_mm + slack_mm:
        unit = length.unit
        string = f"{scale_mm:g} mm" if unit == "mm" else f"{_inward(in_unit(scale_mm, unit), False)} {unit}"
        allowed = allowed_text(low_mm, high_mm, unit)
        if length.mm > scale_mm:
            raise ValueError(f"{length.text()} is out of range: beyond the {string} string (allowed {allowed})")
        raise ValueError(f"{length.text()} is out of range (allowed {allowed} on the {string} string)")
    return min(max(_exact_ratio(length, scale_mm), low), high)


def _exact_ratio(length: Length, scale_mm: float) -> float:
    """length / scale_mm rounded once from the exact quotient of the typed decimal (so a fraction
    saved as its shortest decimal in mm reads back to the same float); plain division otherwise."""
    if not length.decimal:
        return length.mm / scale_mm
    try:
        exact = Fraction(length.decimal)
    except (ValueError, ZeroDivisionError):
        return length.mm / scale_mm
    return float(exact * _EXACT_MM_PER_UNIT[length.unit] / Fraction(scale_mm))


def length_within(length: Length, low_mm: float, high_mm: float) -> float:
    """Millimetres of ``length`` if within [low_mm, high_mm]; else ValueError in the typed unit."""
    if not low_mm <= length.mm <= high_mm:
        mm = "" if length.unit == "mm" else f" ({length.mm:g} mm)"
        raise ValueError(f"{length.text()}{mm} is out of range (allowed {allowed_text(low_mm, high_mm, length.unit)})")
    return length.mm


def allowed_text(low_mm: float, high_mm: float, unit: str) -> str:
    """``low .. high unit`` with the bounds rounded inward to 5 digits, so a bound typed as shown is allowed."""
    return f"{_inward(in_unit(low_mm, unit), True)} .. {_inward(in_unit(high_mm, unit), False)} {unit}"


def _inward(value: float, up: bool) -> str:
    """``value`` to 5 significant digits, rounded up (a low bound) or down (a high one)."""
    if value == 0:
        return "0"
    digits = max(0, 4 - math.floor(math.log10(abs(value))))
    scaled = value * 10**digits
    # The slack keeps 324.00000000000006 at 324: the bound itself is allowed (see the slack above).
    rounded = math.ceil(scaled - 1e-6) if up else math.floor(scaled + 1e-6)
    return f"{rounded / 10**digits:g}"


def _finite(number_text: str, text: str) -> float:
    try:
        value = float(number_text)
    except ValueError:
        raise ValueError(f"expected a length like {LENGTH_EXAMPLES}, got {str(text)!r}") from None
    if not math.isfinite(value):
        raise ValueError(f"expected a finite length, got {str(text)!r}")
    return value


def parse_note(text: str) -> int:
    """MIDI note number of a name (``E2``, ``F#3``, ``Bb1``, ``C-1``) or of a whole number 0..127."""
    text = str(text).strip()
    if re.fullmatch(r"[+-]?\d{1,6}", text):  # bounded: int() of thousands of digits is refused
        note = int(text)
        if not MIDI_NOTE_LOW <= note <= MIDI_NOTE_HIGH:
            raise ValueError(f"MIDI notes lie in 0 .. 127 (C-1 .. G9), got {text}")
        return note
    m = _NOTE.match(text)
    if not m:
        raise ValueError(f"expected a MIDI note 0 .. 127 or a name like E2, F#3 or Bb1, got {text!r}")
    letter, accidental, octave = m.groups()
    note = 12 * (int(octave) + 1) + _STEPS[letter.lower()] + _ACCIDENTALS[accidental]
    if not MIDI_NOTE_LOW <= note <= MIDI_NOTE_HIGH:
        raise ValueError(f"{text} would be MIDI note {note}: MIDI notes lie in 0 .. 127 (C-1 .. G9)")
    return note


def note_name(note: int) -> str:
    """Scientific pitch name of a MIDI note (60 = C4, sharps for the black keys); "-" for no note (< 0)."""
    if note < 0:
        return "-"
    return f"{NOTE_NAMES[note % 12]}{note // 12 - 1}"
