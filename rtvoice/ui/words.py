"""How the UI names parameters and values to the user: pickups counted from 1 everywhere a
person reads them, positions in mm first, numbers rounded to what matters."""

from __future__ import annotations

import math
import re
from typing import Any

_PICKUP = re.compile(r"^pickup\.(\d+)\.(\w+)$")
SIGNIFICANT = 4  # digits a value is shown with: 0.0617, not 0.06172839506172839


def display_name(name: str) -> str:
    """``pickup.0.level_db`` -> ``pickup 1 level_db`` (the string view's and table's numbering)."""
    m = _PICKUP.match(name)
    return f"pickup {int(m.group(1)) + 1} {m.group(2)}" if m else name


def rounded(value: Any) -> str:
    """A value as a person reads it: floats to :data:`SIGNIFICANT` digits, the rest as typed."""
    if isinstance(value, float):
        return f"{value:.{SIGNIFICANT}g}" if math.isfinite(value) else str(value)
    return str(value)


def said_value(name: str, value: Any, scale_length_mm: float) -> str:
    """``pickup 1 position = 40.0 mm (0.0617)``: a position or width in mm, then the fraction."""
    if name.endswith((".position", ".width", ".slant")) and isinstance(value, float):
        return f"{display_name(name)} = {value * scale_length_mm:.1f} mm ({rounded(value)})"
    return f"{display_name(name)} = {rounded(value)}"


def xrun_note(more: int, total: int, own_late: int) -> str:
    """Why the xrun count climbed by ``more``: rtvoice's own callback overran its period
    (``own_late`` callbacks did, in the same time) or it finished in time and the machine or the
    audio server held up the audio thread."""
    if own_late > 0:
        why = (f"rtvoice's callback overran its period {own_late} time{'s' if own_late > 1 else ''}: "
               "fewer voices or string modes, or a larger --block, lighten it")
    else:
        why = "the callback finished in time: the machine or the audio server held up the audio thread"
    return f"warning: {more} more xrun{'s' if more > 1 else ''} ({total} in all); {why}"
