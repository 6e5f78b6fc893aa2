"""The neck view: frets, pickups and notes where the instrument puts them, and the requests its keys
and mouse send (the widget alone, in a small app of its own: no engine).

Reference facts (outside the project):
- The 12-TET fret rule (common practice): fret n lies L (1 - 2^(-n/12)) from the nut, so
  L 2^(-n/12) from the saddle; fret 12 at L / 2. For L = 648 mm: fret 1 at 36.37 mm from the nut,
  fret 5 at 162.55 mm, fret 7 at 215.51 mm, fret 12 at 324.00 mm, fret 22 at 466.16 mm (calc, the
  project's shared references.md, "The instrument: strings and frets").
- A straight (slanted) pickup across equally spaced strings: its distance from the saddle changes
  linearly from the treble string to the bass string (elementary geometry), which
  rtvoice.physics.frets.interpolate_across_strings computes.
- The usual inlay frets: 3 5 7 9 12 15 17 19 21 24 (common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.ui import run
from textual.app import App, ComposeResult
from textual.message import Message
from textual.widgets import Input

from rtvoice.physics.frets import interpolate_across_strings
from rtvoice.ui.widgets.neck_drawing import LOUDEST_MARK, NOTE_MARK, PLUCK_MARK
from rtvoice.ui.widgets.neck_layout import (
    fret_at_column,
    fret_columns,
    hand_columns,
    neck_layout,
    note_column,
    pickup_cells,
    ruler_labels,
)
from rtvoice.ui.widgets.neck_view import NeckPicture, NeckView, PickupPlace, SoundingNote

SCALE_MM = 648.0
STANDARD = (64, 59, 55, 50, 45, 40)  # E4 B3 G3 D3 A2 E2, string 1 first (common practice)
#: A view whose string spans exactly 648 columns: one column per millimetre of a 648 mm scale
#: (7 label columns, the saddle, 648 columns to the nut, one past it).
MM_WIDE = 657
#: From shared/references.md (calc, 12-TET fret rule): mm from the nut for L = 648 mm.
FRET_FROM_NUT_MM_648 = {1: 36.37, 5: 162.55, 7: 215.51, 12: 324.00, 22: 466.16}
INLAYS = (3, 5, 7, 9, 12, 15, 17, 19, 21, 24)  # common practice


def from_nut_mm(scale_mm: float, fret: float) -> float:
    """The 12-TET fret rule (common practice): L (1 - 2^(-n/12)) from the nut."""
    return scale_mm * (1.0 - 2.0 ** (-fret / 12.0))


def picture(**changes) -> NeckPicture:
    base = dict(scale_length_mm=SCALE_MM, frets=22, open_notes=STANDARD,
                pickups=(PickupPlace(40.0, 40.0, 12.0), PickupPlace(170.0, 150.0, 16.0)),
                pluck_mm=110.0, pluck_width_mm=10.0, hand_fret=5.0, sounding=(), selected="pluck")
    base.update(changes)
    return NeckPicture(**base)


# -- geometry -------------------------------------------------------------------------------------
@pytest.mark.parametrize("width", [40, 57, 80, 120, 200, MM_WIDE])
@pytest.mark.parametrize("scale_mm", [SCALE_MM, 628.0, 864.0])
def test_every_fret_column_is_the_12_tet_fret_rule_scaled_onto_the_string(width, scale_mm):
    lay = neck_layout(width, scale_mm)
    span = lay.nut_column - lay.saddle_column
    cols = fret_columns(lay, 36)
    for n in range(37):
        from_saddle_mm = scale_mm - from_nut_mm(scale_mm, n)  # 12-TET fret rule (common practice)
        assert cols[n] == lay.saddle_column + round(from_saddle_mm / scale_mm * span), n
    assert cols[0] == lay.nut_column
    # Fret 12 at half the scale (12-TET fret rule): halfway between saddle and nut, within a column.
    assert abs(cols[12] - (lay.saddle_column + lay.nut_column) / 2) <= 0.5
    assert all(a >= b for a, b in zip(cols, cols[1:], strict=False))  # frets close up towards the saddle


def test_at_a_column_a_millimetre_the_frets_fall_at_the_published_distances_from_the_nut():
    """At one column per mm, the nut's column minus a fret's is its distance from the nut in mm
    (shared/references.md, calc values of the 12-TET fret rule), to the column's rounding."""
    lay = neck_layout(MM_WIDE, SCALE_MM)
    assert lay.nut_column - lay.saddle_column == 648
    cols = fret_columns(lay, 22)
    for n, mm in FRET_FROM_NUT_MM_648.items():
        assert abs((lay.nut_column - cols[n]) - mm) <= 0.5 + 1e-9, n
    assert lay.nut_column - cols[12] == 324  # exactly half of 648 mm


@pytest.mark.parametrize("width", [40, 80, MM_WIDE])
def test_a_slanted_pickup_crosses_each_string_where_the_straight_line_from_treble_to_bass_does(width):
    bass_mm, treble_mm, aperture_mm, strings = 170.0, 150.0, 16.0, 6
    lay = neck_layout(width, SCALE_MM)
    cells = pickup_cells(lay, PickupPlace(bass_mm, treble_mm, aperture_mm), strings)
    assert [c.string for c in cells] == [1, 2, 3, 4, 5, 6]
    for cell in cells:
        # Elementary geometry: equal string spacing, so each string moves the line by the same step.
        line_mm = treble_mm + (cell.string - 1) / (strings - 1) * (bass_mm - treble_mm)
        assert cell.distance_mm == pytest.approx(line_mm, abs=1e-9)
        assert cell.distance_mm == pytest.approx(interpolate_across_strings(bass_mm, treble_mm, cell.string, strings))
        assert cell.column == lay.column_of(line_mm)
        assert (cell.first_column, cell.last_column) == (lay.column_of(line_mm - aperture_mm / 2),
                                                         lay.column_of(line_mm + aperture_mm / 2))
    if width == MM_WIDE:  # a column a mm: 150, 154, ..., 170 mm from the saddle, 16 columns of aperture
        assert [c.column - lay.saddle_column for c in cells] == [150, 154, 158, 162, 166, 170]
        assert all(c.last_column - c.first_column == 16 for c in cells)


def test_a_note_is_marked_inside_its_fret_cell_and_a_click_there_finds_that_fret():
    """The cell of fret n lies between fret n-1 and fret n (12-TET fret rule, common practice)."""
    for width in (40, 80, 120, MM_WIDE):
        lay = neck_layout(width, SCALE_MM)
        cols = fret_columns(lay, 24)
        assert fret_at_column(lay, lay.nut_column, 24) == 0
        assert fret_at_column(lay, lay.saddle_column + 1, 24) is None  # the body, past fret 24
        for n in range(1, 25):
            c = note_column(lay, n, cols)
            assert cols[n] <= c <= cols[n - 1]
            if cols[n - 1] - cols[n] >= 2:  # a cell wider than the fret itself: strictly inside
                assert cols[n] <= c < cols[n - 1]
                assert fret_at_column(lay, c, 24) == n
    lay = neck_layout(MM_WIDE, SCALE_MM)
    for n in range(1, 23):  # a column a mm: inside the cell the 12-TET fret rule gives, in mm from the saddle
        mm = note_column(lay, n) - lay.saddle_column
        assert SCALE_MM - from_nut_mm(SCALE_MM, n) < mm < SCALE_MM - from_nut_mm(SCALE_MM, n - 1)


def test_the_hand_spans_four_fret_cells_from_its_fret():
    """One finger a fret (common practice): a hand at fret 5 covers the cells of frets 5 to 8,
    from fret 4 to fret 8 (12-TET fret rule)."""
    lay = neck_layout(MM_WIDE, SCALE_MM)
    first, last = hand_columns(lay, 5.0, 22)
    assert first - lay.saddle_column == round(SCALE_MM - from_nut_mm(SCALE_MM, 8))
    assert last - lay.saddle_column == round(SCALE_MM - from_nut_mm(SCALE_MM, 4))
    assert hand_columns(lay, 5.0, 0) is None  # no frets, no hand to show


def test_the_ruler_numbers_the_inlay_frets_and_drops_numbers_when_narrow():
    def numbers(width: int) -> dict[int, int]:
        lay = neck_layout(width, SCALE_MM)
        return {int(lab.text): lab.column for lab in ruler_labels(lay, 24) if lab.text.isdigit()}

    wide, narrow = numbers(200), numbers(40)
    assert sorted(wide) == list(INLAYS)  # every inlay fret, nothing else (common practice)
    assert 12 in narrow and len(narrow) < len(wide)
    for width in (40, 80, 200):
        lay = neck_layout(width, SCALE_MM)
        labels = ruler_labels(lay, 24)
        assert {"saddle", "nut"} <= {lab.text for lab in labels}
        for a, b in zip(labels, labels[1:], strict=False):  # a blank column between neighbours
            assert a.column + len(a.text) < b.column


@pytest.mark.parametrize("bad", [dict(open_notes=()), dict(open_notes=tuple(range(40, 53))), dict(frets=37),
                                 dict(frets=-1), dict(scale_length_mm=0.0), dict(scale_length_mm=math.nan),
                                 dict(open_notes=(64, 128))])
def test_a_picture_outside_what_an_instrument_may_be_is_refused(bad):
    with pytest.raises(ValueError):
        picture(**bad)


# -- the widget in an app of its own ----------------------------------------------------------------
class NeckHost(App[None]):
    """Only the neck view and a text field after it (somewhere for the focus to go); every request
    the view posts is kept in ``asked``."""

    def __init__(self, pic: NeckPicture) -> None:
        super().__init__()
        self.pic = pic
        self.asked: list[Message] = []

    def compose(self) -> ComposeResult:
        yield NeckView(self.pic, id="neck")
        yield Input(id="after")

    def on_mount(self) -> None:
        self.query_one(NeckView).focus()

    def on_neck_view_move_requested(self, message: NeckView.MoveRequested) -> None:
        self.asked.append(message)

    def on_neck_view_hand_requested(self, message: NeckView.HandRequested) -> None:
        self.asked.append(message)

    def on_neck_view_select_requested(self, message: NeckView.SelectRequested) -> None:
        self.asked.append(message)


def said(messages: list[Message]) -> list[tuple]:
    """The requests as plain tuples: (kind, element or None, amount)."""
    out: list[tuple] = []
    for m in messages:
        if isinstance(m, NeckView.MoveRequested):
            out.append(("move", m.element, m.delta_mm))
        elif isinstance(m, NeckView.HandRequested):
            out.append(("hand", None, m.delta_frets))
        elif isinstance(m, NeckView.SelectRequested):
            out.append(("select", m.element, None))
    return out


def drive(pic: NeckPicture, steps, size=(120, 12)):
    """Run the host at ``size``, await ``steps(pilot, view)``, and return what it returns."""
    async def body():
        app = NeckHost(pic)
        async with app.run_test(size=size) as pilot:
            await pilot.pause()
            result = await steps(pilot, app.query_one(NeckView))
            await pilot.pause()
            return app, result
    return run(body())


def test_arrows_ask_for_millimetres_and_frets_in_the_direction_they_point():
    async def steps(pilot, view):
        await pilot.press("right", "shift+right", "left", "shift+left")
        view.update_picture(picture(selected="hand"))
        await pilot.press("right", "shift+left")
        view.update_picture(picture(selected="pickup 2"))  # slanted: one request moves both ends
        await pilot.press("right", "shift+left")
        await pilot.pause()
        return view.picture

    app, shown = drive(picture(), steps)
    assert said(app.asked) == [
        ("move", "pluck", 1.0), ("move", "pluck", 10.0), ("move", "pluck", -1.0), ("move", "pluck", -10.0),
        # The nut is on the right: rightwards is towards the nut, a lower fret.
        ("hand", None, -1.0), ("hand", None, 5.0),
        ("move", "pickup 2", 1.0), ("move", "pickup 2", -10.0),
    ]
    assert all(m.control.id == "neck" for m in app.asked)
    # The view moved nothing itself: it still shows the picture it was last handed.
    assert shown == picture(selected="pickup 2")


def test_a_message_field_cannot_be_changed_after_it_is_sent():
    async def steps(pilot, view):
        await pilot.press("right")

    app, _ = drive(picture(), steps)
    with pytest.raises(AttributeError):
        app.asked[0].delta_mm = 5.0


def test_tab_walks_the_elements_then_lets_the_focus_move_on():
    async def steps(pilot, view):
        await pilot.press("tab")
        view.update_picture(picture(selected="pluck", hand_fret=6.0))  # drawn before the app read the request
        await pilot.press("tab")  # steps on from the element asked for, not from the picture's
        view.update_picture(picture(selected="pickup 1"))
        await pilot.press("shift+tab")
        view.update_picture(picture(selected="pickup 2"))
        await pilot.press("tab")  # past the last element: back to the first, and the focus moves on
        await pilot.pause()
        return pilot.app.focused.id

    app, focused = drive(picture(), steps)
    assert said(app.asked) == [("select", "hand", None), ("select", "pickup 1", None),
                               ("select", "hand", None), ("select", "pluck", None)]
    assert focused == "after"


def test_a_click_in_a_fret_cell_takes_the_hand_there():
    pic = picture(hand_fret=5.0)

    async def steps(pilot, view):
        lay = view.layout_now()
        await pilot.click(NeckView, offset=(note_column(lay, 7), 3))  # string 3, the cell of fret 7
        return lay

    app, lay = drive(pic, steps)
    assert said(app.asked) == [("select", "hand", None), ("hand", None, 2.0)]


def test_a_click_on_a_slanted_pickup_takes_hold_of_it_and_a_drag_moves_it_by_the_millimetres_dragged():
    pic = picture()
    row = 6  # the bass string, where the slanted pickup 2 sits 170 mm from the saddle

    async def steps(pilot, view):
        lay = view.layout_now()
        x = pickup_cells(lay, pic.pickups[1], 6)[row - 1].column
        await pilot.mouse_down(NeckView, offset=(x, row))
        await pilot.hover(NeckView, offset=(x + 3, row))
        await pilot.hover(NeckView, offset=(x + 5, row))
        await pilot.mouse_up(NeckView, offset=(x + 5, row))
        return lay, x

    app, (lay, x) = drive(pic, steps)
    asked = said(app.asked)
    assert asked[0] == ("select", "pickup 2", None)
    moves = [a for a in asked[1:] if a[0] == "move"]
    assert moves and all(a[1] == "pickup 2" for a in moves)
    # Relative steps that add up to where the mouse let go, from the pickup's distance under that string.
    assert sum(a[2] for a in moves) == pytest.approx(lay.distance_at(x + 5) - 170.0, abs=1e-5)


def test_a_click_on_the_body_moves_the_selected_pluck_there():
    pic = picture(pluck_mm=110.0)

    async def steps(pilot, view):
        lay = view.layout_now()
        x = lay.column_of(80.0)  # between the two pickups, before the last fret
        await pilot.click(NeckView, offset=(x, 2))
        return lay.distance_at(x)

    app, to_mm = drive(pic, steps)
    assert said(app.asked) == [("move", "pluck", pytest.approx(to_mm - 110.0, abs=1e-6))]


def test_sounding_notes_are_drawn_at_their_string_row_inside_their_fret_cell():
    notes = (SoundingNote(1, 0, -20.0), SoundingNote(3, 7, -6.0, loudest=True), SoundingNote(6, 12, -40.0),
             SoundingNote(4, 22, -30.0))

    async def steps(pilot, view):
        before = view.rows_text()
        view.update_picture(picture(sounding=notes))
        await pilot.pause()
        return before, view.rows_text(), view.layout_now()

    app, (before, rows, lay) = drive(picture(), steps, size=(MM_WIDE, 12))
    assert NOTE_MARK not in "".join(before) and LOUDEST_MARK not in "".join(before)
    for note in notes:
        line = rows[note.string]  # row 0 is the ruler, then string 1 ...
        marks = [i for i, ch in enumerate(line) if ch in (NOTE_MARK, LOUDEST_MARK)]
        assert len(marks) == 1, note
        col = marks[0]
        assert line[col] == (LOUDEST_MARK if note.loudest else NOTE_MARK)
        if note.fret == 0:
            assert col == lay.nut_column + 1  # an open string: past the nut
        else:  # a column a mm: between fret n and fret n-1, in mm from the saddle (12-TET fret rule)
            mm = col - lay.saddle_column
            assert SCALE_MM - from_nut_mm(SCALE_MM, note.fret) < mm < SCALE_MM - from_nut_mm(SCALE_MM, note.fret - 1)
    quiet = [r for s, r in enumerate(rows[1:7], start=1) if s not in {n.string for n in notes}]
    assert all(NOTE_MARK not in r and LOUDEST_MARK not in r for r in quiet)


def test_the_pluck_and_slanted_pickup_are_drawn_on_every_string_at_their_distance():
    async def steps(pilot, view):
        return view.rows_text(), view.layout_now()

    app, (rows, lay) = drive(picture(), steps, size=(MM_WIDE, 12))
    for s in range(1, 7):
        line = rows[s]
        assert line[lay.saddle_column + 110] == PLUCK_MARK  # 110 mm from the saddle
        line_mm = 150.0 + (s - 1) / 5 * 20.0  # straight from treble (150 mm) to bass (170 mm)
        assert line[lay.column_of(line_mm)] == "2"
        assert line[lay.saddle_column + 40] == "1"  # the straight pickup at 40 mm
    assert "saddle" in rows[0] and "nut" in rows[0]
    assert "648 mm scale" in rows[-1] and "pluck 110.0 mm" in rows[-1]


@pytest.mark.parametrize("width", [40, 80])
@pytest.mark.parametrize("strings", [1, 6, 12])
@pytest.mark.parametrize("frets", [0, 22, 36])
def test_the_view_draws_every_instrument_it_may_be_handed_at_narrow_widths_too(width, strings, frets):
    notes = tuple(np.arange(30, 30 + 5 * strings, 5)[::-1].tolist())
    pic = picture(open_notes=notes, frets=frets, sounding=(SoundingNote(strings, frets, -3.0, loudest=True),),
                  hand_fret=min(5.0, frets), selected="pickup 2")

    async def steps(pilot, view):
        return view.rows_text(), view.size.height, view.layout_now()

    app, (rows, height, lay) = drive(pic, steps, size=(width, 20))
    assert height == strings + 3 and len(rows) == strings + 3
    assert all(len(r) == width for r in rows)
    assert rows[strings].count(LOUDEST_MARK) == 1
    assert "pickup 2" in rows[-1] and "648 mm" in rows[-1]
    if width == 40:  # no room for string labels: each string row starts at the saddle
        assert lay.label_columns == 0 and all(r[0] == "┃" for r in rows[1:strings + 1])
