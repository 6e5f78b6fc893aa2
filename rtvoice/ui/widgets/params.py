"""Every schema parameter, grouped, with value, unit, range and the controller mapped to it."""

from __future__ import annotations

from textual.binding import Binding
from textual.message import Message
from textual.widgets import DataTable

from rtvoice.engine import MAX_PICKUPS, Settings, lookup
from rtvoice.ui.format import value_text
from rtvoice.ui.guard import Guarded

PICKUP_COUNT = "pickups"  # a row of our own: how many pickups there are
COLUMNS = ("group", "parameter", "value", "unit", "range", "control")
#: Widths that fit 80 columns with the cell padding and the scroll bar; the control column takes the rest.
WIDTHS = {"group": 11, "parameter": 15, "value": 8, "unit": 4, "range": 13, "control": 13}


def row_names(settings: Settings) -> list[str]:
    """Canonical names in table order: schema order, the pickup count before the pickups."""
    names = settings.names()
    first_pickup = next(i for i, n in enumerate(names) if n.startswith("pickup."))
    return names[:first_pickup] + [PICKUP_COUNT] + names[first_pickup:]


def group_and_label(name: str) -> tuple[str, str]:
    if name == PICKUP_COUNT:
        return "pickup", "count"
    parts = name.split(".")
    if parts[0] == "pickup":
        return f"pickup {int(parts[1]) + 1}", parts[2]
    if len(parts) == 1:
        return "engine", parts[0]
    return parts[0], parts[1]


def range_text(name: str, width: int = WIDTHS["range"]) -> str:
    """Allowed values without the unit (it has its own column), cut to ``width`` with an ellipsis."""
    if name == PICKUP_COUNT:
        return f"1 .. {MAX_PICKUPS}"
    param = lookup(name)[0]
    if param.kind == "choice" or param.choices:
        text = "|".join(str(c) for c in param.choices)
    elif param.kind == "shape":
        text = "[x, y] list"
    else:
        text = f"{param.low:g} .. {param.high:g}"
    return text if len(text) <= width else text[: width - 1] + "…"


SOURCE_LABELS = {"pressure": "press", "note_timbre": "note74", "note_pressure": "note-press"}


def control_text(name: str, controls: list[dict]) -> str:
    """The controllers mapped to ``name`` (entries in [[control]] form), as short text."""
    shown = []
    for c in controls:
        if c.get("target") != name:
            continue
        source = c.get("source", "cc")
        label = f"CC{c['cc']}" if source == "cc" else SOURCE_LABELS.get(source, str(source))
        if c.get("channel") is not None:
            label += f" ch{c['channel']}"
        shown.append(label)
    text = ", ".join(shown)
    width = WIDTHS["control"]
    return text if len(text) <= width else text[: width - 1] + "…"


class ParamTable(Guarded, DataTable):
    """The parameter list; asks the app for changes through messages."""

    DEFAULT_CSS = """
    ParamTable { height: 1fr; }
    """

    BINDINGS = [
        Binding("left", "step(-1)", "less", show=False),
        Binding("right", "step(1)", "more", show=False),
        Binding("shift+left", "step(-1, True)", "a little less", show=False),
        Binding("shift+right", "step(1, True)", "a little more", show=False),
    ]

    class StepRequested(Message):
        def __init__(self, name: str, direction: int, fine: bool):
            super().__init__()
            self.name, self.direction, self.fine = name, direction, fine

    class EditRequested(Message):
        def __init__(self, name: str):
            super().__init__()
            self.name = name

    def __init__(self, settings: Settings, **kwargs):
        super().__init__(cursor_type="row", zebra_stripes=True, **kwargs)
        self.settings = settings
        self.controls: list[dict] = []
        self._names: list[str] = []

    def on_mount(self) -> None:
        for col in COLUMNS:
            self.add_column(col, key=col, width=WIDTHS[col])
        self._rebuild()

    @property
    def selected_name(self) -> str | None:
        if not self._names:
            return None
        return self._names[min(self.cursor_row, len(self._names) - 1)]

    def _cells(self, name: str, previous_group: str) -> list[str]:
        group, label = group_and_label(name)
        if name == PICKUP_COUNT:
            value, unit = str(len(self.settings.pickups)), ""
        else:
            param, _ = lookup(name)
            value, unit = value_text(param, self.settings.get(name)), param.unit
        return [group if group != previous_group else "", label, value, unit, range_text(name),
                control_text(name, self.controls)]

    def _rebuild(self) -> None:
        keep = self.selected_name
        self.clear()
        self._names = row_names(self.settings)
        group = ""
        for name in self._names:
            cells = self._cells(name, group)
            group = group_and_label(name)[0]
            self.add_row(*cells, key=name)
        if keep in self._names:
            self.move_cursor(row=self._names.index(keep), animate=False)

    def show_settings(self, settings: Settings, controls: list[dict] | None = None) -> None:
        self.settings = settings
        if controls is not None:
            self.controls = list(controls)
        if row_names(settings) != self._names:
            self._rebuild()
            return
        group = ""
        for name in self._names:
            cells = self._cells(name, group)
            group = group_and_label(name)[0]
            for col, cell in zip(COLUMNS, cells, strict=True):
                if self.get_cell(name, col) != cell:
                    self.update_cell(name, col, cell)

    def select_name(self, name: str) -> None:
        if name in self._names:
            self.move_cursor(row=self._names.index(name), animate=False)

    def action_step(self, direction: int, fine: bool = False) -> None:
        if self.selected_name:
            self.post_message(self.StepRequested(self.selected_name, int(direction), bool(fine)))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        if self.selected_name:
            self.post_message(self.EditRequested(self.selected_name))
