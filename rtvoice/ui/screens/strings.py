"""The instrument's strings in one table: number, open note, gauge, plain or wound, core, material,
and what they give at the open string (tension in N, Mersenne-Taylor; B, Fletcher 1964), worked
out by the engine (:func:`rtvoice.engine.string_physics_of`, :func:`rtvoice.engine.inharmonicity_of`).

Enter on a cell asks for a new value of the field the cell shows (``strings.<n>.<field>``) through
the app's typed-value prompt; the derived tension and B take a measured value that wins over the
gauge's (``none`` gives the gauge back).
"""

from __future__ import annotations

from collections.abc import Callable

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Footer, Static

from rtvoice.engine import Settings, SettingsError, inharmonicity_of, string_physics_of
from rtvoice.ui.format import note_name
from rtvoice.ui.guard import Guarded

MM_PER_INCH = 25.4
#: (heading, the field enter edits there); the gauge is shown in mm and in inches, both the diameter.
COLUMNS = (("str", None), ("note", "note"), ("mm", "diameter_mm"), ("in", "diameter_mm"),
           ("kind", "wrap"), ("core", "core_mm"), ("material", "material"), ("T (N)", "tension_n"),
           ("B", "inharmonicity"))
TITLE = "strings, 1 the highest: gauge in mm and in, core in mm; T and B open"
NOTE_TEXT = "enter: type a new value for the field under the cursor   escape: close"
UNKNOWN = "?"  # a derived value the engine could not work out (shown, not raised)


def inch_text(mm: float) -> str:
    """A gauge as string makers print it, in thousandths of an inch: ``.010``, ``.046`` (common practice)."""
    text = f"{mm / MM_PER_INCH:.3f}"
    return text[1:] if text.startswith("0.") else text


def string_cells(settings: Settings, n: int) -> list[str]:
    """The table's cells for string ``n`` (1 = the highest)."""
    entry = settings.strings[n - 1]
    try:
        physics = string_physics_of(settings, n)
        tension, b = f"{physics.tension_n:.1f}", f"{inharmonicity_of(settings, n):.2e}"
    except (SettingsError, ValueError):
        tension = b = UNKNOWN
    return [str(n), note_name(int(entry.note)), f"{entry.diameter_mm:.3f}", inch_text(entry.diameter_mm),
            "wound" if entry.wound else "plain", "-" if entry.core_mm is None else f"{entry.core_mm:.3f}",
            entry.material, tension, b]


class StringsTable(Guarded, DataTable):
    """One row a string, string 1 (the highest) first."""

    def __init__(self, settings: Settings, **kwargs):
        super().__init__(cursor_type="cell", zebra_stripes=True, **kwargs)
        self.settings = settings

    def on_mount(self) -> None:
        for heading, _ in COLUMNS:
            self.add_column(heading, key=heading)
        self.show_settings(self.settings)

    def show_settings(self, settings: Settings) -> None:
        self.settings = settings
        at = self.cursor_coordinate
        self.clear()
        for n in range(1, len(settings.strings) + 1):
            self.add_row(*string_cells(settings, n), key=str(n))
        if self.row_count:
            self.move_cursor(row=min(at.row, self.row_count - 1), column=at.column, animate=False)

    def field_at_cursor(self) -> str | None:
        """The dotted name of the field under the cursor, or None on the string's number."""
        row, column = self.cursor_coordinate
        field = COLUMNS[column][1] if 0 <= column < len(COLUMNS) else None
        if field is None or not 0 <= row < len(self.settings.strings):
            return None
        return f"strings.{row + 1}.{field}"

    def rows_text(self) -> list[str]:
        """The table as plain text, one line a string (what a screen reader or a test reads)."""
        return ["  ".join(string_cells(self.settings, n)) for n in range(1, len(self.settings.strings) + 1)]


class StringsScreen(Guarded, ModalScreen[None]):
    """The strings table over the main screen; ``edit`` asks for a typed value of a dotted name."""

    DEFAULT_CSS = """
    StringsScreen { align: center middle; }
    #strings-box { width: 100; max-width: 100%; height: auto; max-height: 100%; border: heavy $accent;
                   background: $panel; padding: 0 1; }
    #strings-table { height: auto; max-height: 16; }
    """
    BINDINGS = [Binding("escape,f3", "close", "close")]

    def __init__(self, settings: Settings, edit: Callable[[str], None]):
        super().__init__()
        self.settings, self.edit = settings, edit

    def compose(self) -> ComposeResult:
        with Vertical(id="strings-box"):
            yield Static(TITLE, id="strings-title")
            yield StringsTable(self.settings, id="strings-table")
            yield Static(NOTE_TEXT, classes="dim")
        yield Footer()

    def on_mount(self) -> None:
        self.query_one(StringsTable).focus()

    @property
    def table(self) -> StringsTable:
        return self.query_one(StringsTable)

    def show_settings(self, settings: Settings) -> None:
        """The sound changed (a field typed here, a controller, a flip): show its strings."""
        self.settings = settings
        self.table.show_settings(settings)

    def on_data_table_cell_selected(self, event: DataTable.CellSelected) -> None:
        event.stop()
        name = self.table.field_at_cursor()
        if name is not None:
            self.edit(name)

    def action_close(self) -> None:
        self.dismiss(None)
