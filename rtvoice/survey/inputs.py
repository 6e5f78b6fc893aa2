"""What a survey is asked: grids of positions and widths, notes, placements.

Positions and widths are fractions of the speaking length from the bridge, or
lengths with a unit, ``mm``, ``cm`` or ``in`` (converted with
``string.scale_length_mm``). A grid is ``START:STOP:STEP`` (STOP included when
the steps land on it) or one value. A unit after the last number applies to every
number of the grid (``40:160:2mm``, ``2:12:0.5cm``); it may also follow each
number. A value out of range is refused in the unit it was typed in.

Notes are MIDI numbers or names (``E2``, ``F#3``, ``Bb1``; 60 = C4), alone or
as ranges ``A:B`` and ``A:B:STEP`` (STEP in semitones).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from rtvoice.engine import MM_PER_UNIT, PARAMS, PICKUP_FIELDS, Param, allowed_text, in_unit, parse_note, split_unit
from rtvoice.errors import UserError

MAX_AXIS_POINTS = 10_000
STOP_TOLERANCE = 1e-9  # relative slack so 0.1:0.3:0.1 includes 0.3 despite rounding


class SurveyError(UserError, ValueError):
    """Bad survey input (a grid, a placement, a missing optional extra): one line, exit 2.

    ``key`` is the option (``--pickup``), ``value`` what was given; the message reads
    ``KEY = VALUE: REASON`` as a settings error's does.
    """

    def __init__(self, key: str, value: Any, reason: str, source: str = "", *, allowed: str = ""):
        super().__init__(reason, source=source, key=key, value=value, allowed=allowed)


@dataclass(frozen=True)
class _Range:
    """A schema parameter's bounds (fractions of the scale length), both of them present."""

    low: float
    high: float


def _range_of(param: Param) -> _Range:
    """``param``'s bounds; a length the survey varies must have both (checked once, at import)."""
    if param.low is None or param.high is None:
        raise RuntimeError(f"schema parameter {param.name!r} has no range: a survey length needs both bounds")
    return _Range(param.low, param.high)


#: Which schema parameter bounds each kind of length.
_BOUNDS = {
    "pickup": _range_of(PICKUP_FIELDS["position"]),
    "pluck": _range_of(PARAMS["excitation.position"]),
    "width": _range_of(PICKUP_FIELDS["width"]),
}
_WHAT = {"pickup": "pickup position", "pluck": "pluck position", "width": "pickup width"}


@dataclass(frozen=True)
class Placement:
    """One survey point: the surveyed pickup's centre and width, the pluck position (fractions)."""

    pickup: float
    pluck: float
    width: float


def _number(text: str, key: str, spec: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise SurveyError(key, spec, f"{text!r} is not a number (use 0.25, 0.1:0.3:0.01, 40:160:2mm or 1.5in)") \
            from None
    if not math.isfinite(value):
        raise SurveyError(key, spec, f"{text!r} is not a finite number")
    return value


def parse_lengths(spec: str, scale_mm: float, key: str) -> tuple[list[float], str | None]:
    """The numbers of ``spec`` as fractions of the length, and the unit of the last (None: fractions)."""
    parts = [p for p in str(spec).split(":")]
    if not 1 <= len(parts) <= 3 or any(not p.strip() for p in parts):
        raise SurveyError(key, spec, "expected VALUE or START:STOP:STEP")
    split = [split_unit(p) for p in parts]
    last = split[-1][1]
    given = next((unit for _, unit in split if unit), None)
    if last is None and given:
        raise SurveyError(key, spec, f"write {given} after the last number or after every number (as in 40:160:2mm)")
    return [_number(t, key, spec) * MM_PER_UNIT[unit or last] / scale_mm if last else _number(t, key, spec)
            for t, unit in split], last


def parse_grid(spec: str, kind: str, scale_mm: float, key: str | None = None) -> np.ndarray:
    """Grid values (fractions of the length) of ``spec`` for ``kind`` "pickup", "pluck" or "width".

    Raises SurveyError for a malformed or empty grid, a step that is not positive,
    a position outside the string (the schema's range) or a width wider than the string.
    """
    key = key or f"--{kind}"
    numbers, unit = parse_lengths(spec, scale_mm, key)
    if len(numbers) == 2:
        raise SurveyError(key, spec, "a range needs a step: START:STOP:STEP")
    if len(numbers) == 1:
        values = np.array(numbers)
    else:
        start, stop, step = numbers
        if step <= 0:
            raise SurveyError(key, spec, "the step must be positive")
        if stop < start:
            raise SurveyError(key, spec, "empty grid: STOP is below START")
        count = math.floor((stop - start) / step * (1 + STOP_TOLERANCE) + STOP_TOLERANCE) + 1
        if count > MAX_AXIS_POINTS:
            raise SurveyError(key, spec, f"{count} points; at most {MAX_AXIS_POINTS} along one axis")
        values = np.minimum(start + step * np.arange(count), stop)  # no rounding past STOP
    for v in (values.min(), values.max()):
        check_length(float(v), kind, scale_mm, key, spec, unit)
    return np.clip(values, _BOUNDS[kind].low, _BOUNDS[kind].high)  # a bound typed in a unit, to the last bit


def check_length(value: float, kind: str, scale_mm: float, key: str, spec: str, unit: str | None = None) -> float:
    """``value`` (a fraction) if it fits ``kind``'s schema range, else a plain-words SurveyError.

    ``unit`` is the unit the value was typed in (None: as a fraction); the message uses it.
    """
    param = _BOUNDS[kind]
    if unit is None:
        shown, string = f"{value:.6g} ({value * scale_mm:.1f} mm)", f"{scale_mm:g} mm"
        allowed = f"{param.low:g} .. {param.high:g} ({param.low * scale_mm:.1f} .. {param.high * scale_mm:.1f} mm)"
    else:
        shown, string = f"{in_unit(value * scale_mm, unit):.6g} {unit}", f"{in_unit(scale_mm, unit):.5g} {unit}"
        allowed = allowed_text(param.low * scale_mm, param.high * scale_mm, unit)
    if kind == "width" and value > 1.0:
        raise SurveyError(key, spec, f"{shown} is wider than the string ({string})")
    if kind != "width" and not 0.0 < value < 1.0:
        raise SurveyError(key, spec, f"{shown} is outside the string (0 .. {string} from the bridge)")
    # Slack: a bound typed in a unit, as the message shows it, is allowed despite rounding.
    slack = 0.0 if unit is None else 1e-9
    if not param.low - slack <= value <= param.high + slack:
        raise SurveyError(key, spec, f"{shown} is outside the allowed {_WHAT[kind]}s {allowed}")
    return min(max(value, param.low), param.high)


def parse_single(spec: str, kind: str, scale_mm: float, key: str) -> float:
    """One length (a fraction, or mm, cm, in) checked against ``kind``'s range."""
    numbers, unit = parse_lengths(spec, scale_mm, key)
    if len(numbers) != 1:
        raise SurveyError(key, spec, "expected one value, not a grid")
    return check_length(numbers[0], kind, scale_mm, key, spec, unit)


def parse_placement(spec: str, default: Placement, scale_mm: float, key: str) -> Placement:
    """``PICKUP[,PLUCK[,WIDTH]]`` (each a fraction or a length); omitted parts come from ``default``."""
    parts = [p.strip() for p in str(spec).split(",")]
    if not 1 <= len(parts) <= 3 or not parts[0]:
        raise SurveyError(key, spec, "expected PICKUP[,PLUCK[,WIDTH]], e.g. 40mm,130mm")
    kinds = ("pickup", "pluck", "width")
    values = [getattr(default, k) for k in kinds]
    for i, text in enumerate(parts):
        if text:
            values[i] = parse_single(text, kinds[i], scale_mm, key)
    return Placement(*values)


def parse_notes(spec: str) -> list[int]:
    """MIDI notes of ``N``, ``A:B`` (inclusive) or ``A:B:STEP``, numbers or names; ValueError in plain words."""
    parts = str(spec).split(":")
    if len(parts) > 3:
        raise ValueError(f"expected N, A:B or A:B:STEP, got {spec!r}")
    start = parse_note(parts[0])
    stop = parse_note(parts[1]) if len(parts) > 1 else start
    try:
        step = int(parts[2]) if len(parts) == 3 else 1
    except ValueError:
        raise ValueError(f"the step of a note range is a whole number of semitones, got {spec!r}") from None
    if step <= 0:
        raise ValueError(f"the step of a note range must be positive, got {spec!r}")
    notes = list(range(start, stop + 1, step))
    if not notes:
        raise ValueError(f"empty note range {spec!r}: the last note is below the first")
    return notes
