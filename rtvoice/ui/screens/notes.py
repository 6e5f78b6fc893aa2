"""The help screen and the first-start listening note."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Static

from rtvoice.engine import CEILING_DBFS, Settings
from rtvoice.ui.guard import Guarded
from rtvoice.ui.keyboard import (
    OCTAVE_DOWN,
    OCTAVE_UP,
    STRINGS_DOWN,
    STRINGS_UP,
    KeyboardPlayer,
    layout_lines,
    string_layout_lines,
)

HELP_KEYS = [
    ("anywhere", [
        ("ctrl+q, ctrl+c", "quit (asks first if a sound is unsaved)"),
        ("f1 or ?", "this help"),
        ("ctrl+o", "presets (in the list: ^n save as, ^e rename, ^d delete, ^b back to saved)"),
        ("ctrl+s", "save the sound to its user preset"),
        ("ctrl+t", "flip between sound slots A and B"),
        ("ctrl+y", "copy this slot into the other one"),
        ("ctrl+g", "switch the top view: harmonics / output spectrum / A/B of the two slots"),
        ("ctrl+l", "learn: the next control moved drives the chosen parameter"),
        ("ctrl+r", "restart the engine if it stopped"),
        ("f2", "brightness map over pickup and pluck positions; arrows move the live sound"),
        ("tab", "move between the string and the parameter list"),
    ]),
    ("playing", [
        ("letters, digits", "pluck a note (it rings out by itself)"),
        (f"{OCTAVE_DOWN} {OCTAVE_UP}", "octave down / up"),
        ("space", "mute every string (all notes off)"),
    ]),
    ("on the string", [
        ("up / down", "choose the pluck point or a pickup"),
        ("left / right", "move it 1 mm (shift: 10 mm); the mouse drags it"),
        ("[ ]", "narrower / wider contact or aperture, 1 mm"),
    ]),
    ("in the parameter list", [
        ("up / down", "choose a parameter"),
        ("left / right", "step it down / up (shift: finer)"),
        ("enter", "type a value (lengths also take mm, cm or in, like 120mm)"),
    ]),
]


#: On a fretted instrument: the keys that differ from the open rule's, and the neck view's.
FRETTED_PLAYING = [
    ("letters, digits", "pluck a string at a fret (it rings out by itself)"),
    (f"{STRINGS_DOWN} {STRINGS_UP}", "the rows move to the lower / higher strings"),
    (f"{OCTAVE_DOWN} {OCTAVE_UP}", "the rows move 12 frets towards the nut / the saddle"),
    ("space", "mute every string (all notes off)"),
]
FRETTED_PLACES = [
    ("on the neck", [
        ("tab / shift+tab", "choose the pluck, the hand or a pickup, then the next view"),
        ("left / right", "move it 1 mm (shift: 10 mm), a slanted pickup's both ends"),
        ("", "together; the hand a fret (shift: five); the mouse drags them"),
        ("f3", "the strings: gauges, tension and B; enter types a new value"),
    ]),
]
FRETTED_RULES = [
    "A key sends its note (open note plus fret) on its string's MIDI channel.",
    "instrument.assign = channel: that string plays it, at that fret.",
    "instrument.assign = hand: the engine gives it to the string where it",
    "falls nearest the hand (hand.fret), as it does any MIDI note.",
]


METER_WORDS = [
    ("load", "time the audio callback takes, as a share of its block period (median, then p99); "
             "bold from 70 %"),
    ("xruns", "blocks the audio server did not get in time; when they climb, the message line says "
              "whether rtvoice's own callback ran late or the machine held it up"),
    ("voices", "strings sounding now"),
    ("peak", "the loudest output sample in dBFS (the ceiling is -1 dBFS)"),
    ("limit", "how far the limiter turned the output down to hold the ceiling, in dB (0: not at all)"),
    ("MIDI ◆/◇", "◆ lights for a moment on each MIDI message; the number counts them"),
    ("kHz, ms", "the sample rate, and the MIDI-to-sound latency with its parts: the engine's block, "
                "the audio output's own latency and the limiter's look-ahead"),
    ("MIDI in", "the MIDI inputs open now; audio out: the output and its ports"),
]


def help_text(rows: list[str] | None = None) -> str:
    """Playing first (with the keyboard rows), then the keys of each place, the bars and the meters.

    ``rows``: on a fretted instrument, the rows as they play its strings now
    (:func:`rtvoice.ui.keyboard.string_layout_lines`); the help then tells the neck's keys
    instead of the one-string view's."""
    lines = ["How to play and edit", ""]
    fretted = rows is not None
    sections = [(n, FRETTED_PLAYING if fretted and n == "playing" else keys) for n, keys in HELP_KEYS
                if not (fretted and n == "on the string")]
    if fretted:
        sections += FRETTED_PLACES
    for section, keys in sorted(sections, key=lambda item: item[0] != "playing"):
        lines.append(f"{section}:")
        lines += [f"  {k:<16} {what}" for k, what in keys]
        if section == "playing" and rows is not None:
            lines.append("  The keyboard rows are the instrument's strings, a fret a key:")
            lines += [f"  {row}" for row in rows]
            lines += [f"  {line}" for line in FRETTED_RULES]
        elif section == "playing":
            lines.append("  The keyboard rows are four strings a fourth apart; each key is one fret higher:")
            lines += [f"  {row}" for row in layout_lines()]
        lines.append("")
    lines += ["Bars: █ live level of each harmonic of the loudest note;",
              "      │ what the model predicts at the attack; · predicted below the scale.", ""]
    lines += ["The meter lines:"] + [f"  {k:<10} {what}" for k, what in METER_WORDS]
    return "\n".join(lines)


class HelpScreen(Guarded, ModalScreen[None]):
    DEFAULT_CSS = """
    HelpScreen { align: center middle; }
    #help-body { width: 84; max-width: 100%; height: 100%; max-height: 100%; border: heavy $accent;
                 background: $panel; padding: 0 1; }
    """
    BINDINGS = [Binding("escape,f1,q,question_mark", "close", "close")]

    def __init__(self, player: KeyboardPlayer | None = None, settings: Settings | None = None) -> None:
        """With ``player`` and ``settings`` (a fretted instrument) the help tells its keyboard rows."""
        super().__init__()
        self.rows = None if player is None or settings is None else string_layout_lines(player, settings)

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Static(help_text(self.rows), id="help-text")
            yield Static("escape: close", classes="dim")
        yield Footer()

    def action_close(self) -> None:
        self.dismiss(None)


SAFETY_TEXT = (
    "Before you play: protect your hearing.\n\n"
    "Start with your amplifier or headphones turned down and raise the level slowly. "
    f"rtvoice never sends more than {CEILING_DBFS:.0f} dBFS (its limiter holds every sample "
    f"there, and the waveform between the samples at {CEILING_DBFS:.0f} dBTP), but what that means "
    "in your ears depends on everything after the computer. "
    "Long sessions at high level damage hearing for good; take breaks.\n\n"
    "This note is shown once."
)


class SafetyScreen(Guarded, ModalScreen[None]):
    DEFAULT_CSS = """
    SafetyScreen { align: center middle; }
    #safety-box { width: 64; max-width: 100%; height: auto; border: heavy $warning; padding: 0 1;
                  background: $panel; }
    """
    BINDINGS = [Binding("enter,escape", "close", "understood")]

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="safety-box"):
            yield Static(SAFETY_TEXT, id="safety-text")
            yield Button("Understood (enter)", id="safety-ok", variant="warning")

    def on_mount(self) -> None:
        self.query_one(Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(None)

    def action_close(self) -> None:
        self.dismiss(None)
