"""The top line (which sound, which slot, changed or not) and the message line."""

from __future__ import annotations

from typing import Any

from rich.text import Text
from textual.widget import Widget

from rtvoice.ui.format import note_name
from rtvoice.ui.guard import Guarded
from rtvoice.ui.words import display_name

MODIFIED_MARK = "✱ changed"


class SoundLine(Guarded, Widget):
    """Sound name, origin, changed marker, A/B slot, octave and what the last note is; on a fretted
    instrument the hand's fret and the strings and frets the keyboard rows play instead of the octave."""

    DEFAULT_CSS = """
    SoundLine { height: 1; background: $boost; }
    """

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.fields: dict[str, Any] = {}

    def show(self, **fields: Any) -> None:
        if fields != self.fields:
            self.fields = fields
            self.refresh()

    def render(self) -> Text:
        f = self.fields
        name = f.get("preset") or "(unsaved sound)"
        origin = f" [{f['origin']}]" if f.get("origin") else ""
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f" sound: {name}{origin}", style="bold")
        if f.get("dirty"):
            text.append(f" {MODIFIED_MARK}", style="bold")
        text.append(f"  slot {f.get('slot', 'A')}")
        if f.get("learning"):  # the learn target matters more than the octave while learning
            text.append(f"  LEARN {display_name(f['learning'])}: move a control", style="reverse")
            return text
        if f.get("hand"):
            text.append(f"  {f['hand']}")
        else:
            text.append(f"  oct {f.get('octave', 0):+d}")
        note = f.get("note", -1)
        if note is not None and note >= 0:
            text.append(f"  ringing {note_name(note)}")
        if f.get("keys"):  # last: the first thing a narrow line leaves out
            text.append(f"  {f['keys']}")
        return text


class MessageLine(Guarded, Widget):
    """The last message: errors begin with 'refused:' or 'error:' so they read without colour."""

    DEFAULT_CSS = """
    MessageLine { height: 1; }
    """

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.text = ""
        self.is_error = False

    def say(self, text: str, error: bool = False) -> None:
        self.text, self.is_error = text, error
        self.refresh()

    def render(self) -> Text:
        style = "bold red" if self.is_error else ""
        return Text(self.text, style=style, no_wrap=True, overflow="ellipsis")
