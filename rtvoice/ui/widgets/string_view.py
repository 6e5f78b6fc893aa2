"""The string from bridge to nut at its scale length, with the pluck point and the pickups.

Keys and the mouse move the selected element; the widget only asks for a move
(a :class:`StringView.MoveRequested` message) and redraws from the settings the
app hands back, so a refused move leaves the picture unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

from rich.text import Text
from textual import events
from textual.binding import Binding
from textual.message import Message
from textual.widget import Widget

from rtvoice.engine import Settings, lookup
from rtvoice.ui.guard import Guarded

BRIDGE_LABEL, NUT_LABEL = "bridge ", " nut"
PLUCK_MARK = "▼"
OTHER_PLUCK_MARK, OTHER_PICKUP_MARK = "▽", "⋮"  # the other A/B slot's pluck and pickups
OTHER_STYLE = "dim"
SELECT_STYLE = "reverse bold"
PICKUP_STYLE = "#70b0c8"
PLUCK_STYLE = "#e0a040"
STEP_MM, BIG_STEP_MM = 1.0, 10.0


@dataclass(frozen=True)
class Element:
    """One movable thing on the string: the pluck point or a pickup."""

    label: str  # "pluck", "pickup 1", ...
    position_name: str  # canonical parameter name of its position
    width_name: str  # ... and of its width (contact or aperture)


def clamp_to_range(name: str, value: float) -> float:
    """Hold a dragged or nudged value inside its range (typed values are checked, not held).

    A side without a bound (``low`` or ``high`` None in the schema) holds nothing back, as the
    schema's own check reads it."""
    param, _ = lookup(name)
    if param.low is not None:
        value = max(value, param.low)
    if param.high is not None:
        value = min(value, param.high)
    return value


def elements_of(settings: Settings) -> list[Element]:
    out = [Element("pluck", "excitation.position", "excitation.width")]
    for i in range(len(settings.pickups)):
        out.append(Element(f"pickup {i + 1}", f"pickup.{i}.position", f"pickup.{i}.width"))
    return out


class StringView(Guarded, Widget, can_focus=True):
    """Bridge on the left, nut on the right, everything drawn to scale."""

    DEFAULT_CSS = """
    StringView { height: 3; }
    """

    BINDINGS = [
        Binding("left", "nudge(-1)", "move ←", show=False),
        Binding("right", "nudge(1)", "move →", show=False),
        Binding("shift+left", "nudge(-10)", "move 10 mm ←", show=False),
        Binding("shift+right", "nudge(10)", "move 10 mm →", show=False),
        Binding("up", "select(-1)", "previous", show=False),
        Binding("down", "select(1)", "next", show=False),
        Binding("left_square_bracket", "widen(-1)", "narrower", show=False),
        Binding("right_square_bracket", "widen(1)", "wider", show=False),
    ]

    class MoveRequested(Message):
        """Ask for parameter ``name`` (a position or a width) to become ``value`` (a fraction)."""

        def __init__(self, name: str, value: float):
            super().__init__()
            self.name, self.value = name, value

    class NudgeRequested(Message):
        """Ask for parameter ``name`` to move by ``delta_mm`` from wherever it is when the app reads
        this: relative, so every key press counts even when presses come faster than redraws."""

        def __init__(self, name: str, delta_mm: float):
            super().__init__()
            self.name, self.delta_mm = name, delta_mm

    class Selected(Message):
        """The selected element changed (the app may show or learn its position)."""

        def __init__(self, element: Element):
            super().__init__()
            self.element = element

    def __init__(self, settings: Settings, **kwargs):
        super().__init__(**kwargs)
        self.settings = settings
        self.other: Settings | None = None  # the other A/B slot's sound, drawn faintly where it differs
        self.selected = 0
        self._dragging = False

    # -- data in ------------------------------------------------------------------
    def show_settings(self, settings: Settings, other: Settings | None = None) -> None:
        self.settings = settings
        self.other = other
        self.selected = min(self.selected, len(elements_of(settings)) - 1)
        self.refresh()

    @property
    def element(self) -> Element:
        return elements_of(self.settings)[self.selected]

    # -- geometry -----------------------------------------------------------------
    def _span(self) -> tuple[int, int]:
        """First and last column of the string."""
        left = len(BRIDGE_LABEL)
        right = max(left + 8, self.size.width - len(NUT_LABEL) - 1)
        return left, right

    def column_of(self, fraction: float) -> int:
        left, right = self._span()
        return left + round(fraction * (right - left))

    def fraction_at(self, column: int) -> float:
        left, right = self._span()
        return (column - left) / (right - left)

    # -- drawing ------------------------------------------------------------------
    def render(self) -> Text:
        s = self.settings
        left, right = self._span()
        width = right + 1 + len(NUT_LABEL)
        marks = [" "] * width
        line = list(BRIDGE_LABEL) + ["━"] * (right - left + 1) + list(NUT_LABEL)
        line[left], line[right] = "┣", "┫"
        styles: list[str | None] = [None] * width
        self._mark_other(marks, left, right)  # first: this slot's own marks go over it
        for i, p in enumerate(s.pickups):
            lo = self.column_of(p["position"] - p["width"] / 2)
            hi = self.column_of(p["position"] + p["width"] / 2)
            lo, hi = max(left + 1, lo), min(right - 1, max(lo, hi))
            for c in range(lo, hi + 1):
                line[c] = "▒"
                styles[c] = PICKUP_STYLE
            centre = min(max(self.column_of(p["position"]), left), right)
            marks[centre] = str(i + 1)
        if not s.get("excitation.shape"):  # a pluck shape replaces the position: no mark for it
            pc = min(max(self.column_of(s.get("excitation.position")), left), right)
            marks[pc] = PLUCK_MARK
        sel = self.element
        sel_col = min(max(self.column_of(s.get(sel.position_name)), left), right)
        text = Text(no_wrap=True, overflow="crop")
        for c, ch in enumerate(marks):
            if ch == " ":
                text.append(ch)
                continue
            style = (PLUCK_STYLE if ch == PLUCK_MARK else OTHER_STYLE if ch in (OTHER_PLUCK_MARK, OTHER_PICKUP_MARK)
                     else PICKUP_STYLE)
            text.append(ch, style=SELECT_STYLE if c == sel_col else style)
        text.append("\n")
        for c, ch in enumerate(line):
            text.append(ch, style=styles[c] or "dim")
        text.append("\n")
        text.append(self._readout())
        return text

    def _mark_other(self, marks: list[str], left: int, right: int) -> None:
        """The other slot's pluck (▽) and pickup centres (⋮) where they are not where this slot's are."""
        o = self.other
        if o is None or o is self.settings:
            return
        if o.get("excitation.position") != self.settings.get("excitation.position") and not o.get("excitation.shape"):
            marks[min(max(self.column_of(o.get("excitation.position")), left), right)] = OTHER_PLUCK_MARK
        mine = {round(p["position"], 9) for p in self.settings.pickups}
        for p in o.pickups:
            if round(p["position"], 9) not in mine:
                marks[min(max(self.column_of(p["position"]), left), right)] = OTHER_PICKUP_MARK

    def _readout(self) -> str:
        """The selected element in full (mm from the bridge and fraction), the others in short."""
        s = self.settings
        scale = s.get("string.scale_length_mm")
        sel = self.element
        pos, wid = s.get(sel.position_name), s.get(sel.width_name)
        what = "contact" if sel.label == "pluck" else "aperture"
        shaped = len(s.get("excitation.shape"))
        if sel.label == "pluck" and shaped:
            text = f"▶pluck: a shape of {shaped} points (the position is not used)"
        else:
            text = f"▶{sel.label} {pos * scale:.1f} mm ({pos:.3f}), {what} {wid * scale:.1f} mm"
        others = [f"{el.label} {s.get(el.position_name) * scale:.0f} mm" if not (el.label == "pluck" and shaped)
                  else "pluck: shape" for i, el in enumerate(elements_of(s)) if i != self.selected]
        return "   ".join([text, *others])

    # -- keys ---------------------------------------------------------------------
    def action_nudge(self, mm: float) -> None:
        self.post_message(self.NudgeRequested(self.element.position_name, float(mm)))

    def action_widen(self, mm: float) -> None:
        self.post_message(self.NudgeRequested(self.element.width_name, float(mm)))

    def action_select(self, step: int) -> None:
        n = len(elements_of(self.settings))
        self.selected = (self.selected + int(step)) % n
        self.refresh()
        self.post_message(self.Selected(self.element))

    # -- mouse --------------------------------------------------------------------
    def on_mouse_down(self, event: events.MouseDown) -> None:
        self.focus()
        nearest = self._nearest(event.x)
        if nearest is not None and nearest != self.selected:
            self.selected = nearest
            self.post_message(self.Selected(self.element))
        self._dragging = True
        self.capture_mouse()
        self._drag_to(event.x)

    def on_mouse_move(self, event: events.MouseMove) -> None:
        if self._dragging:
            self._drag_to(event.x)

    def on_mouse_up(self, event: events.MouseUp) -> None:
        if self._dragging:
            self._dragging = False
            self.release_mouse()

    def _nearest(self, column: int, reach: int = 3) -> int | None:
        best, best_d = None, reach + 1
        for i, el in enumerate(elements_of(self.settings)):
            d = abs(self.column_of(self.settings.get(el.position_name)) - column)
            if d < best_d:
                best, best_d = i, d
        return best

    def _drag_to(self, column: int) -> None:
        left, right = self._span()
        if left <= column <= right:
            value = clamp_to_range(self.element.position_name, round(self.fraction_at(column), 4))
            self.post_message(self.MoveRequested(self.element.position_name, value))
