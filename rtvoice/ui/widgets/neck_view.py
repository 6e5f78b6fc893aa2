"""The neck seen from above: strings and frets to scale, the sounding notes at their string and
fret, the pickups (slanted where they are), the picking spot and the fretting hand.

Like the one-string view, this widget never changes the sound: keys and the mouse post requests
(:class:`NeckView.MoveRequested`, :class:`NeckView.HandRequested`,
:class:`NeckView.SelectRequested`) and the view redraws only from the :class:`NeckPicture` the
app hands back (:meth:`NeckView.update_picture`), so a refused move leaves the picture as it was.
Where everything falls is worked out in :mod:`rtvoice.ui.widgets.neck_layout`.

Keys: left/right move the selected element 1 mm (shift: 10 mm) along the strings, in the
direction of the arrow on the screen; the hand moves a fret (shift: five). Tab and shift+tab
walk through the elements (pluck, hand, each pickup); past the last (or first) one the focus
moves on to the next widget, so the view is no trap for the keyboard.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import groupby
from typing import Any

from rich.segment import Segment
from textual import events
from textual.binding import Binding
from textual.geometry import Size
from textual.message import Message
from textual.strip import Strip
from textual.widget import Widget

from rtvoice.ui.guard import Guarded
from rtvoice.ui.widgets.neck_drawing import Cell, draw_rows
from rtvoice.ui.widgets.neck_layout import (
    HAND,
    PLUCK,
    NeckLayout,
    NeckPicture,
    PickupPlace,
    SoundingNote,
    elements_of,
    fret_at_column,
    neck_layout,
    pickup_cells,
    pickup_element,
    pickup_index,
)

__all__ = ["HAND", "PLUCK", "NeckPicture", "NeckView", "PickupPlace", "SoundingNote", "elements_of",
           "pickup_element", "pickup_index"]

STEP_MM, BIG_STEP_MM = 1.0, 10.0
HAND_STEP_FRETS, HAND_BIG_STEP_FRETS = 1.0, 5.0
REACH_COLUMNS = 1  # a click this close to a pluck or pickup mark takes hold of it
def _strip(row: list[Cell], width: int) -> Strip:
    """One row as a strip, a segment for each run of one style. Blanks keep their own style
    (unlike cells.strip_of): a blank after a reversed mark must not show reversed."""
    segments = [Segment("".join(ch for ch, _ in run), style) for style, run in groupby(row, key=lambda c: c[1])]
    return Strip(segments).adjust_cell_length(width)


@dataclass
class _Drag:
    """What a mouse drag holds: the element, and where the last request left it."""

    element: str
    string: int  # the string row it was taken on (a slanted pickup's distance differs by string)
    last_column: int
    last_mm: float = 0.0
    last_fret: float = 0.0


class NeckView(Guarded, Widget, can_focus=True):
    """Saddle on the left, nut on the right, string 1 at the top; redraws from a NeckPicture."""

    DEFAULT_CSS = """
    NeckView { height: auto; }
    """

    BINDINGS = [
        Binding("left", "step(-1, False)", "move ←", show=False),
        Binding("right", "step(1, False)", "move →", show=False),
        Binding("shift+left", "step(-1, True)", "move far ←", show=False),
        Binding("shift+right", "step(1, True)", "move far →", show=False),
        Binding("tab", "select(1)", "next element", show=False),
        Binding("shift+tab", "select(-1)", "previous element", show=False),
    ]

    class _Request(Message):
        """A request from the neck view; ``control`` is the view that asked (Textual's convention)."""

        def __init__(self, neck_view: NeckView) -> None:
            super().__init__()
            self._neck_view = neck_view

        @property
        def control(self) -> NeckView:
            return self._neck_view

    class MoveRequested(_Request):
        """Ask for ``element`` (the pluck or a pickup; both ends of a slanted pickup together) to
        move ``delta_mm`` along the strings, positive away from the saddle. Relative, so every
        press counts even when presses come faster than redraws."""

        def __init__(self, neck_view: NeckView, element: str, delta_mm: float) -> None:
            super().__init__(neck_view)
            self._element, self._delta_mm = element, float(delta_mm)

        @property
        def element(self) -> str:
            return self._element

        @property
        def delta_mm(self) -> float:
            return self._delta_mm

    class HandRequested(_Request):
        """Ask for the fretting hand to move ``delta_frets`` (positive: up the neck, towards the saddle)."""

        def __init__(self, neck_view: NeckView, delta_frets: float) -> None:
            super().__init__(neck_view)
            self._delta_frets = float(delta_frets)

        @property
        def delta_frets(self) -> float:
            return self._delta_frets

    class SelectRequested(_Request):
        """Ask for ``element`` to become the selected one (the next picture's ``selected``)."""

        def __init__(self, neck_view: NeckView, element: str) -> None:
            super().__init__(neck_view)
            self._element = element

        @property
        def element(self) -> str:
            return self._element

    def __init__(self, picture: NeckPicture, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self._picture = picture
        self._asked: str | None = None  # a selection asked for and not yet in a picture
        self._drag: _Drag | None = None
        self._strips: list[Strip] = []
        self._drawn_for: tuple[NeckPicture, int] | None = None

    # -- data in --------------------------------------------------------------------------------
    @property
    def picture(self) -> NeckPicture:
        return self._picture

    @picture.setter
    def picture(self, picture: NeckPicture) -> None:
        self.update_picture(picture)

    def update_picture(self, picture: NeckPicture) -> None:
        """Draw ``picture`` from now on (nothing is redrawn when it equals the one shown)."""
        # A selection asked for stays the one keys step from until a picture shows it, or shows the
        # app chose another: a picture drawn before the app read the request must not undo it.
        if picture.selected == self._asked or picture.selected != self._picture.selected:
            self._asked = None
        if picture == self._picture:
            return
        resized = picture.string_count != self._picture.string_count
        self._picture = picture
        self.refresh(layout=resized)

    @property
    def selected(self) -> str:
        """The selected element as the picture has it (the pluck when it names none there is)."""
        s = self._picture.selected
        return s if s in elements_of(self._picture) else PLUCK

    def layout_now(self) -> NeckLayout:
        return neck_layout(self.size.width, self._picture.scale_length_mm)

    # -- drawing --------------------------------------------------------------------------------
    def get_content_height(self, container: Size, viewport: Size, width: int) -> int:
        return self._picture.string_count + 3  # ruler, strings, hand, caption

    def render_line(self, y: int) -> Strip:
        strips = self._current_strips()
        return strips[y] if y < len(strips) else Strip.blank(self.size.width)

    def rows_text(self) -> list[str]:
        """The picture as plain text, one string per row (what a screen reader or a test reads)."""
        return [strip.text for strip in self._current_strips()]

    def _current_strips(self) -> list[Strip]:
        key = (self._picture, self.size.width)
        if key != self._drawn_for:
            rows = draw_rows(self._picture, self.layout_now(), self.selected)
            self._strips = [_strip(row, self.size.width) for row in rows]
            self._drawn_for = key
        return self._strips

    # -- keys -----------------------------------------------------------------------------------
    def action_step(self, direction: int, big: bool) -> None:
        """An arrow: the selected element moves the way the arrow points on the screen."""
        element = self._asked or self.selected
        if element == HAND:  # the nut is on the right: rightwards is down the neck, lower frets
            size = HAND_BIG_STEP_FRETS if big else HAND_STEP_FRETS
            self.post_message(self.HandRequested(self, -direction * size))
        else:
            size = BIG_STEP_MM if big else STEP_MM
            self.post_message(self.MoveRequested(self, element, direction * size))

    def action_select(self, step: int) -> None:
        order = elements_of(self._picture)
        now = order.index(self._asked or self.selected)
        nxt = now + step
        self._asked = order[nxt % len(order)]
        self.post_message(self.SelectRequested(self, self._asked))
        if not 0 <= nxt < len(order):  # walked past the end: the focus moves on
            if step > 0:
                self.screen.focus_next()
            else:
                self.screen.focus_previous()

    # -- mouse ----------------------------------------------------------------------------------
    def on_mouse_down(self, event: events.MouseDown) -> None:
        self.focus()
        at = event.get_content_offset(self)
        if at is None:
            return
        grip = self._grip(at.x, at.y)
        if grip is None:
            return
        if grip.element != (self._asked or self.selected):
            self._asked = grip.element
            self.post_message(self.SelectRequested(self, grip.element))
        self._drag = grip
        self.capture_mouse()
        self._drag_to(at.x)

    def on_mouse_move(self, event: events.MouseMove) -> None:
        at = event.get_content_offset(self) if self._drag is not None else None
        if at is not None:
            self._drag_to(at.x)

    def on_mouse_up(self, event: events.MouseUp) -> None:
        if self._drag is not None:
            self._drag = None
            self.release_mouse()

    def _grip(self, column: int, row: int) -> _Drag | None:
        """What a click at (column, row) takes hold of: a pluck or pickup mark within reach on a
        string, else the hand in a fret cell, else the selected pluck or pickup on the body.
        ``last_column`` is -1 when the element must go to the click, the click column when the
        click only takes hold of it."""
        p, lay = self._picture, self.layout_now()
        strings = p.string_count
        if row == strings + 1:  # the hand's row
            return _Drag(HAND, 1, -1, last_fret=p.hand_fret) if p.frets else None
        if not 1 <= row <= strings:
            return None
        near: list[tuple[int, str, float]] = []  # (columns away, element, distance under this string)
        near.append((abs(lay.column_of(p.pluck_mm) - column), PLUCK, p.pluck_mm))
        for i, pickup in enumerate(p.pickups):
            cell = pickup_cells(lay, pickup, strings)[row - 1]
            near.append((abs(cell.column - column), pickup_element(i), cell.distance_mm))
        chosen = self._asked or self.selected
        near.sort(key=lambda n: (n[0], n[1] != chosen))
        away, element, mm = near[0]
        if away <= REACH_COLUMNS:
            return _Drag(element, row, column, last_mm=mm)
        if p.frets and fret_at_column(lay, column, p.frets) is not None:
            return _Drag(HAND, row, -1, last_fret=p.hand_fret)
        if chosen == HAND:
            return None
        under = {e: d for _, e, d in near}
        return _Drag(chosen, row, -1, last_mm=under[chosen])

    def _drag_to(self, column: int) -> None:
        d = self._drag
        if d is None or column == d.last_column:
            return
        d.last_column = column
        p, lay = self._picture, self.layout_now()
        if d.element == HAND:
            fret = fret_at_column(lay, column, p.frets)
            if fret is not None and fret != d.last_fret:
                self.post_message(self.HandRequested(self, fret - d.last_fret))
                d.last_fret = fret
            return
        mm = lay.distance_at(column)
        if mm != d.last_mm:
            self.post_message(self.MoveRequested(self, d.element, round(mm - d.last_mm, 6)))
            d.last_mm = mm

