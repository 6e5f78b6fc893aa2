"""Small text formatters shared by the widgets (units always shown)."""

from __future__ import annotations

import math
from typing import Any

from rtvoice.engine import NOTE_NAMES, Param, note_name  # one note naming for the UI and the command line

__all__ = ["NOTE_NAMES", "db_text", "note_name", "position_text", "value_text"]

SILENT_DB = -120.0  # the host reports silence as -120 dB


def db_text(value_db: float, width: int = 6) -> str:
    if not math.isfinite(value_db) or value_db <= SILENT_DB:
        return "-inf".rjust(width)
    return f"{value_db:{width}.1f}"


def value_text(param: Param, value: Any) -> str:
    """A value as the parameter table shows it (compact, with no unit)."""
    if param.kind == "shape":
        return "triangle" if not value else f"{len(value)} points"
    if param.kind == "float":
        v = float(value)
        if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e5):
            return f"{v:.3g}"
        return f"{v:.4g}"
    return str(value)


def position_text(fraction: float, scale_mm: float) -> str:
    return f"{fraction * scale_mm:.0f} mm ({fraction:.3f})"
