"""The neck view's picture as rows of styled cells: strings, frets, pickups, pluck, hand,
sounding notes and a caption (no Textual here; :mod:`rtvoice.ui.widgets.neck_view` turns the rows
into strips, :mod:`rtvoice.ui.widgets.neck_layout` says where everything falls)."""

from __future__ import annotations

from collections.abc import Callable

from rich.style import Style

from rtvoice.ui.format import note_name
from rtvoice.ui.widgets.neck_layout import (
    HAND,
    PLUCK,
    NeckLayout,
    NeckPicture,
    SoundingNote,
    fret_columns,
    fret_distance_from_saddle_mm,
    hand_columns,
    note_column,
    pickup_cells,
    pickup_element,
    pickup_index,
    ruler_labels,
    span_columns,
)

PICKUP_MARKS = "123456789abcdefghijklmnopqrstuvwxyz"

# Marks and colours of our own; the shape tells each element apart, the colour only helps.
SADDLE_MARK, NUT_MARK, STRING_MARK, SOUNDING_MARK = "┃", "║", "─", "━"
FRET_MARK, SOUNDING_FRET_MARK = "┼", "┿"
APERTURE_MARK, PLUCK_MARK, PLUCK_WIDTH_MARK = "░", "╳", "╍"
NOTE_MARK, LOUDEST_MARK = "●", "◉"
HAND_LEFT, HAND_LINE, HAND_RIGHT, HAND_ONE = "╰", "─", "╯", "^"
NECK_STYLE = Style(color="#c8c8c8", bold=True)
STRING_STYLE = Style(color="#7c7c7c")
FRET_STYLE = Style(color="#5c5c5c")
LABEL_STYLE = Style(dim=True)
PICKUP_STYLE = Style(color="#70b0c8")  # the one-string view's pickup and pluck colours
APERTURE_STYLE = Style(color="#3c6878")
PLUCK_STYLE = Style(color="#e0a040")
HAND_STYLE = Style(color="#98c070")
LOUDEST_STYLE = Style(color="#ff7a50", bold=True)
#: A sounding note's colour by its level, brightest first (floor in dB re full scale).
LEVEL_STYLES = ((-12.0, Style(color="#f4e8b0", bold=True)), (-30.0, Style(color="#d8c070")),
                (float("-inf"), Style(color="#8c7c48")))
SELECT = Style(reverse=True, bold=True)


def note_style(note: SoundingNote) -> Style:
    if note.loudest:
        return LOUDEST_STYLE
    return next(style for floor, style in LEVEL_STYLES if note.level_db >= floor)


Cell = tuple[str, Style | None]
Put = Callable[[int, int, str, Style | None], None]  # (row, column, mark, style): one cell, if on screen


def draw_rows(p: NeckPicture, lay: NeckLayout, selected: str) -> list[list[Cell]]:
    """Every row of the view: the ruler, one row a string (string 1 first), the hand, the caption."""
    width = lay.width
    frets = fret_columns(lay, p.frets)
    rows: list[list[Cell]] = [[(" ", None)] * width for _ in range(p.string_count + 3)]

    def put(row: int, column: int, mark: str, style: Style | None) -> None:
        if 0 <= column < width:
            rows[row][column] = (mark, style)

    for label in ruler_labels(lay, p.frets):
        for i, ch in enumerate(label.text):
            put(0, label.column + i, ch, LABEL_STYLE)
    for s in range(1, p.string_count + 1):
        _draw_string(put, p, lay, frets, s)
    _draw_elements(put, p, lay, selected)
    for note in p.sounding:
        if 1 <= note.string <= p.string_count and 0 <= note.fret <= p.frets:
            put(note.string, note_column(lay, note.fret, frets), LOUDEST_MARK if note.loudest else NOTE_MARK,
                note_style(note))
    _draw_hand(put, p, lay, selected, p.string_count + 1)
    for i, ch in enumerate(caption(p, selected, width)):
        put(p.string_count + 2, i, ch, None)
    return rows


def _draw_string(put: Put, p: NeckPicture, lay: NeckLayout,
                 frets: tuple[int, ...], s: int) -> None:
    """String ``s``'s row: its label, the string from saddle to nut with its frets, and the part
    of it that speaks (saddle to the stopping fret) drawn heavy while a note sounds on it."""
    label = f"{s:>2} {note_name(p.open_notes[s - 1])}" if lay.label_columns > 3 else f"{s:>2}"
    for i, ch in enumerate(label[: max(lay.label_columns - 1, 0)]):
        put(s, i, ch, LABEL_STYLE)
    notes = [n for n in p.sounding if n.string == s and 0 <= n.fret <= p.frets]
    speaks_to = max((frets[n.fret] for n in notes), default=lay.saddle_column)
    speaking = max(notes, key=lambda n: (n.loudest, n.level_db), default=None)
    speak_style = note_style(speaking) if speaking is not None else STRING_STYLE
    for c in range(lay.saddle_column + 1, lay.nut_column):
        if c < speaks_to:
            put(s, c, SOUNDING_MARK, speak_style)
        else:
            put(s, c, STRING_MARK, STRING_STYLE)
    for c in frets[1:]:
        if lay.saddle_column < c < lay.nut_column:
            put(s, c, SOUNDING_FRET_MARK if c < speaks_to else FRET_MARK, FRET_STYLE)
    put(s, lay.saddle_column, SADDLE_MARK, NECK_STYLE)
    put(s, lay.nut_column, NUT_MARK, NECK_STYLE)


def _draw_elements(put: Put, p: NeckPicture, lay: NeckLayout, selected: str) -> None:
    """The pickups' apertures and the pluck's width where they span more than a column, then
    their centres on every string, the selected one reversed."""
    strings = range(1, p.string_count + 1)
    cells = [pickup_cells(lay, pickup, p.string_count) for pickup in p.pickups]
    for per_string in cells:
        for cell in per_string:
            for c in range(cell.first_column, cell.last_column + 1):
                put(cell.string, c, APERTURE_MARK, APERTURE_STYLE)
    first, last = span_columns(lay, p.pluck_mm, p.pluck_width_mm)
    for s in strings:
        for c in range(first, last + 1):
            put(s, c, PLUCK_WIDTH_MARK, PLUCK_STYLE)
    for i, per_string in enumerate(cells):
        style = SELECT + PICKUP_STYLE if selected == pickup_element(i) else PICKUP_STYLE
        for cell in per_string:
            put(cell.string, cell.column, PICKUP_MARKS[i % len(PICKUP_MARKS)], style)
    pluck_style = SELECT + PLUCK_STYLE if selected == PLUCK else PLUCK_STYLE
    for s in strings:
        put(s, lay.column_of(p.pluck_mm), PLUCK_MARK, pluck_style)


def _draw_hand(put: Put, p: NeckPicture, lay: NeckLayout, selected: str, row: int) -> None:
    """The hand's fret cells as a bracket under the strings, named when there is room."""
    span = hand_columns(lay, p.hand_fret, p.frets)
    if span is None:
        return
    style = SELECT + HAND_STYLE if selected == HAND else HAND_STYLE
    first, last = span
    if first == last:
        put(row, first, HAND_ONE, style)
        return
    for c in range(first, last + 1):
        put(row, c, HAND_LEFT if c == first else HAND_RIGHT if c == last else HAND_LINE, style)
    for word in (f" hand {p.hand_fret:g} ", " hand ", ""):
        if len(word) <= last - first - 1:
            start = first + 1 + (last - first - 1 - len(word)) // 2
            for i, ch in enumerate(word):
                put(row, start + i, ch, style)
            return


def caption(p: NeckPicture, selected: str, width: int) -> str:
    """The scale length and the selected element with its distance from the saddle in mm: the
    longest wording that fits ``width``, the shortest cropped."""
    scale = f"{p.scale_length_mm:g} mm"
    index = pickup_index(selected)
    if selected == HAND:
        mm = fret_distance_from_saddle_mm(p.scale_length_mm, p.hand_fret)
        long = short = f"▶hand at fret {p.hand_fret:g}, {mm:.1f} mm"
        tight = f"▶hand {p.hand_fret:g}: {mm:.0f} mm"
        extra = " from the saddle"
    elif index is not None and index < len(p.pickups):
        pickup = p.pickups[index]
        if pickup.slanted:
            long = f"▶{selected} bass {pickup.bass_mm:.1f} mm, treble {pickup.treble_mm:.1f} mm"
            short = f"▶{selected} {pickup.bass_mm:.1f}/{pickup.treble_mm:.1f} mm"
            tight = f"▶{selected} {pickup.bass_mm:.0f}/{pickup.treble_mm:.0f} mm"
        else:
            long = short = f"▶{selected} {pickup.bass_mm:.1f} mm"
            tight = f"▶{selected} {pickup.bass_mm:.0f} mm"
        extra = f" from the saddle, aperture {pickup.aperture_mm:.1f} mm"
    else:
        long = short = f"▶pluck {p.pluck_mm:.1f} mm"
        tight = f"▶pluck {p.pluck_mm:.0f} mm"
        extra = f" from the saddle, width {p.pluck_width_mm:.1f} mm"
    wordings = (f"{scale} scale  {long}{extra}", f"{scale} scale  {long}", f"{scale} scale  {short}",
                f"{scale}  {short}", f"{scale} {tight}")
    return next((text for text in wordings if len(text) <= width), wordings[-1][:width])
