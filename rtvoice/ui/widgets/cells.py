"""Rows of styled characters as Textual strips (the line API: cheap to redraw 30 times a second)."""

from __future__ import annotations

from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip


def strip_of(cells: list[tuple[str, Style | None]], width: int) -> Strip:
    """One screen row from (text, style) pieces; runs of one style become one segment.

    A blank piece joins the run it is in whatever its style (a space shows no colour), so a
    mostly empty row costs few segments.
    """
    segments: list[Segment] = []
    run_text: list[str] = []
    run_style: Style | None = None
    for text, style in cells:
        if text == " " and run_text:
            run_text.append(text)
            continue
        if style is not run_style and run_text:
            segments.append(Segment("".join(run_text), run_style))
            run_text = []
        run_style = style
        run_text.append(text)
    if run_text:
        segments.append(Segment("".join(run_text), run_style))
    return Strip(segments).adjust_cell_length(width)

