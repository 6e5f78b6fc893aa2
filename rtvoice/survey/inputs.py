"""What a survey is asked: grids of positions and widths, notes, placements.

Positions and widths are fractions of the speaking length from the bridge, or
millimetres with an ``mm`` suffix (converted with ``string.scale_length_mm``).
A grid is ``START:STOP:STEP`` (STOP included when the steps land on it) or one
value. ``mm`` after the last number applies to every number of the grid
(``40:160:2mm``); it may also follow each number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS
from rtvoice.engine.settings import SettingsError

MAX_AXIS_POINTS = 10_000
STOP_TOLERANCE = 1e-9  # relative slack so 0.1:0.3:0.1 includes 0.3 despite rounding


class SurveyError(SettingsError):
    """Bad survey input (a grid, a placement, a missing optional extra): one line, exit 2.

    A SettingsError, so the command line's UserError tuple already reports it.
    """


#: Which schema parameter bounds each kind of length.
_BOUNDS = {
    "pickup": PICKUP_FIELDS["position"],
    "pluck": PARAMS["excitation.position"],
    "width": PICKUP_FIELDS["width"],
}
_WHAT = {"pickup": "pickup position", "pluck": "pluck position", "width": "pickup width"}


@dataclass(frozen=True)
class Placement:
    """One survey point: the surveyed pickup's centre and width, the pluck position (fractions)."""

    pickup: float
    pluck: float
    width: float


def _split_unit(text: str) -> tuple[str, bool]:
    text = text.strip()
    if text.lower().endswith("mm"):
        return text[:-2].strip(), True
    return text, False


def _number(text: str, key: str, spec: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise SurveyError(key, spec, f"{text!r} is not a number (use 0.25, 0.1:0.3:0.01 or 40:160:2mm)") from None
    if not math.isfinite(value):
        raise SurveyError(key, spec, f"{text!r} is not a finite number")
    return value


def parse_lengths(spec: str, scale_mm: float, key: str) -> tuple[list[float], bool]:
    """The numbers of ``spec`` as fractions of the length, and whether they were given in mm."""
    parts = [p for p in str(spec).split(":")]
    if not 1 <= len(parts) <= 3 or any(not p.strip() for p in parts):
        raise SurveyError(key, spec, "expected VALUE or START:STOP:STEP")
    split = [_split_unit(p) for p in parts]
    last_mm = split[-1][1]
    if not last_mm and any(mm for _, mm in split):
        raise SurveyError(key, spec, "write mm after the last number (40:160:2mm) or after every number")
    return [_number(t, key, spec) / scale_mm if last_mm or mm else _number(t, key, spec) for t, mm in split], last_mm


def parse_grid(spec: str, kind: str, scale_mm: float, key: str | None = None) -> np.ndarray:
    """Grid values (fractions of the length) of ``spec`` for ``kind`` "pickup", "pluck" or "width".

    Raises SurveyError for a malformed or empty grid, a step that is not positive,
    a position outside the string (the schema's range) or a width wider than the string.
    """
    key = key or f"--{kind}"
    numbers, _ = parse_lengths(spec, scale_mm, key)
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
        check_length(float(v), kind, scale_mm, key, spec)
    return values


def check_length(value: float, kind: str, scale_mm: float, key: str, spec: str) -> float:
    """``value`` (a fraction) if it fits ``kind``'s schema range, else a plain-words SurveyError."""
    param = _BOUNDS[kind]
    shown = f"{value:.6g} ({value * scale_mm:.1f} mm)"
    if kind == "width" and value > 1.0:
        raise SurveyError(key, spec, f"{shown} is wider than the string ({scale_mm:g} mm)")
    if kind != "width" and not 0.0 < value < 1.0:
        raise SurveyError(key, spec, f"{shown} is outside the string (0 .. {scale_mm:g} mm from the bridge)")
    if not param.low <= value <= param.high:
        raise SurveyError(
            key,
            spec,
            f"{shown} is outside the allowed {_WHAT[kind]}s {param.low:g} .. {param.high:g} "
            f"({param.low * scale_mm:.1f} .. {param.high * scale_mm:.1f} mm)",
        )
    return value


def parse_single(spec: str, kind: str, scale_mm: float, key: str) -> float:
    """One length (fraction or mm) checked against ``kind``'s range."""
    numbers, _ = parse_lengths(spec, scale_mm, key)
    if len(numbers) != 1:
        raise SurveyError(key, spec, "expected one value, not a grid")
    return check_length(numbers[0], kind, scale_mm, key, spec)


def parse_placement(spec: str, default: Placement, scale_mm: float, key: str) -> Placement:
    """``PICKUP[,PLUCK[,WIDTH]]`` (each a fraction or mm); omitted parts come from ``default``."""
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
    """MIDI notes of ``N``, ``A:B`` (inclusive) or ``A:B:STEP``; ValueError in plain words."""
    parts = str(spec).split(":")
    try:
        nums = [int(p) for p in parts]
    except ValueError:
        raise ValueError(f"MIDI note must be a whole number or a range like 40:52, got {spec!r}") from None
    if len(nums) > 3:
        raise ValueError(f"expected N, A:B or A:B:STEP, got {spec!r}")
    start, stop = nums[0], nums[1] if len(nums) > 1 else nums[0]
    step = nums[2] if len(nums) == 3 else 1
    if step <= 0:
        raise ValueError(f"the step of a note range must be positive, got {spec!r}")
    notes = list(range(start, stop + 1, step))
    if not notes:
        raise ValueError(f"empty note range {spec!r}")
    if not all(0 <= n <= 127 for n in notes):
        raise ValueError(f"MIDI notes lie in 0 .. 127, got {spec!r}")
    return notes
