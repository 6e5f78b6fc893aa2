"""The preset list with a filter. It only chooses; the app does the loading and saving."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Input, OptionList, Static
from textual.widgets.option_list import Option

from rtvoice.engine import PresetError, PresetInfo, PresetWarning, read_preset_file
from rtvoice.ui.guard import Guarded

ACTIONS = ("load", "save_as", "rename", "delete", "revert")


@dataclass(frozen=True)
class PresetChoice:
    """What the user asked for: an action and the preset it concerns (if any)."""

    action: str
    info: PresetInfo | None = None

    @property
    def name(self) -> str:
        return self.info.name if self.info else ""

    @property
    def origin(self) -> str:
        return self.info.origin if self.info else ""


class PresetScreen(Guarded, ModalScreen[PresetChoice | None]):
    DEFAULT_CSS = """
    PresetScreen { align: center middle; }
    #preset-box { width: 76; max-width: 100%; height: 90%; border: heavy $accent;
                  background: $panel; padding: 0 1; }
    #preset-list { height: 1fr; }
    #preset-note { height: 2; }
    #preset-buttons { height: auto; }
    #preset-buttons Button { min-width: 8; margin-right: 1; }
    """
    # Control keys, with priority over the filter field (which loses only its ctrl+e "end" and ctrl+d
    # "delete right"; the End and Delete keys still do those), so typing a filter never triggers them.
    BINDINGS = [
        Binding("escape", "close", "close"),
        Binding("ctrl+n", "choose('save_as')", "save as new", priority=True),
        Binding("ctrl+e", "choose('rename')", "rename", priority=True),
        Binding("ctrl+d", "choose('delete')", "delete", priority=True),
        Binding("ctrl+b", "choose('revert')", "back to saved", priority=True),
        Binding("down", "move(1)", show=False),
        Binding("up", "move(-1)", show=False),
    ]

    def __init__(self, presets: list[PresetInfo], current: str = ""):
        super().__init__()
        self.presets = presets
        self.current = current

    def compose(self) -> ComposeResult:
        with Vertical(id="preset-box"):
            yield Static("presets — type to filter, enter loads; factory presets are read-only")
            yield Input(placeholder="filter", id="preset-filter")
            yield OptionList(id="preset-list")
            with Horizontal(id="preset-buttons"):
                yield Button("load ⏎", id="load")
                yield Button("save as ^n", id="save_as")
                yield Button("rename ^e", id="rename")
                yield Button("delete ^d", id="delete")
                yield Button("back to saved ^b", id="revert")
            yield Static("", id="preset-note")
        yield Footer()  # this dialog's keys, not the main screen's

    def on_mount(self) -> None:
        self._fill("")
        self.query_one(Input).focus()

    def _visible(self, text: str) -> list[PresetInfo]:
        words = text.lower().split()
        return [p for p in self.presets if all(w in f"{p.name} {p.origin}".lower() for w in words)]

    def _fill(self, text: str) -> None:
        options = self.query_one(OptionList)
        options.clear_options()
        for p in self._visible(text):
            mark = "●" if p.name == self.current else " "
            options.add_option(Option(f"{mark} {p.name:<40} {p.origin}", id=f"{p.origin}:{p.name}"))
        if options.option_count:
            options.highlighted = 0
        self.query_one("#preset-note", Static).update(
            f"{options.option_count} of {len(self.presets)} presets shown"
        )

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        """Show what the highlighted preset is (its description), or why it cannot be read."""
        info = self.highlighted()
        if info is None:
            return
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", PresetWarning)
                settings = read_preset_file(info.path)
            text = settings.description or "(no description)"
            newer = [w for w in caught if issubclass(w.category, PresetWarning)]
            if newer:
                text += f" (from a newer rtvoice: {newer[0].message})"
        except (PresetError, ValueError) as err:
            text = f"cannot be read: {err}"
        self.query_one("#preset-note", Static).update(f"{info.name}: {text}")

    def on_input_changed(self, event: Input.Changed) -> None:
        self._fill(event.value)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.action_choose("load")

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        event.stop()
        self.action_choose("load")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.action_choose(str(event.button.id))

    def highlighted(self) -> PresetInfo | None:
        options = self.query_one(OptionList)
        if options.highlighted is None:
            return None
        option_id = options.get_option_at_index(options.highlighted).id
        if option_id is None:  # every option is added with "origin:name" as its id; one without names none
            return None
        origin, name = option_id.split(":", 1)
        return next((p for p in self.presets if p.name == name and p.origin == origin), None)

    def action_choose(self, action: str) -> None:
        info = self.highlighted()
        note = self.query_one("#preset-note", Static)
        if action in ("load", "rename", "delete") and info is None:
            note.update("refused: no preset chosen")
            return
        if action in ("rename", "delete") and info is not None and info.origin == "factory":
            # Refused here, and the dialog stays: the next keys must still type, not play notes.
            note.update(f"refused: {info.name!r} is a factory preset and cannot be {action}d"
                        + (": save it as a user preset (ctrl+n)" if action == "rename" else ""))
            return
        self.dismiss(PresetChoice(action, info))

    @property
    def note_text(self) -> str:
        return str(self.query_one("#preset-note", Static).render())

    def action_move(self, step: int) -> None:
        options = self.query_one(OptionList)
        if options.option_count:
            now = options.highlighted if options.highlighted is not None else 0
            options.highlighted = min(max(now + int(step), 0), options.option_count - 1)

    def action_close(self) -> None:
        self.dismiss(None)
