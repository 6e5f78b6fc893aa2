"""Small modal screens: a yes/no question and a one-line text prompt."""

from __future__ import annotations

from collections.abc import Callable

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Static

from rtvoice.ui.guard import Guarded

DIALOG_CSS = """
.dialog { width: 70; max-width: 100%; height: auto; border: heavy $accent; padding: 0 1;
          background: $panel; }
.dialog-buttons { height: auto; width: 100%; align-horizontal: right; }
.dialog-buttons Button { margin-left: 1; min-width: 10; }
.dialog-error { color: $error; text-style: bold; height: auto; }
"""


class AskScreen(Guarded, ModalScreen[bool]):
    """A question answered with y (yes) or n / escape (no)."""

    DEFAULT_CSS = DIALOG_CSS + "AskScreen { align: center middle; }"
    BINDINGS = [
        Binding("y", "answer(True)", "yes"),
        Binding("n,escape", "answer(False)", "no"),
    ]

    def __init__(self, question: str, yes: str = "yes", no: str = "no"):
        super().__init__()
        self.question, self.yes, self.no = question, yes, no

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.question, id="question")
            with Horizontal(classes="dialog-buttons"):
                yield Button(f"{self.yes} (y)", id="yes", variant="warning")
                yield Button(f"{self.no} (n)", id="no", variant="primary")

    def on_mount(self) -> None:
        self.query_one("#no", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "yes")

    def action_answer(self, value: bool) -> None:
        self.dismiss(value)


class PromptScreen(Guarded, ModalScreen[str | None]):
    """One line of text; ``check`` returns an error text to refuse it, or None to accept.

    A refused entry keeps the prompt open with the reason shown, so nothing changes
    until a valid value is given or the prompt is cancelled with escape.
    """

    DEFAULT_CSS = DIALOG_CSS + "PromptScreen { align: center middle; }"
    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, title: str, value: str = "", hint: str = "",
                 check: Callable[[str], str | None] | None = None):
        super().__init__()
        self.title_text, self.value, self.hint, self.check = title, value, hint, check

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.title_text, id="prompt-title")
            if self.hint:
                yield Static(self.hint, id="prompt-hint", classes="dim")
            yield Input(value=self.value, id="prompt-input")
            yield Static("", id="prompt-error", classes="dialog-error")
            yield Static("enter: accept   escape: cancel", classes="dim")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        text = event.value.strip()
        error = self.check(text) if self.check else None
        if error:
            self.query_one("#prompt-error", Static).update(f"refused: {error}")
            return
        self.dismiss(text)

    @property
    def error_text(self) -> str:
        return str(self.query_one("#prompt-error", Static).render())

    def action_cancel(self) -> None:
        self.dismiss(None)
