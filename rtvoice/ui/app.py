"""The terminal UI application: wires the widgets to the sound session and the engine link.

Data flows one way: the app reads the engine's snapshot about 30 times a second
and hands each widget what it shows; widgets ask for changes with messages; the
app validates them through :class:`~rtvoice.ui.session.SoundSession` and only
then tells the engine. A refused change is reported and changes nothing.
"""

from __future__ import annotations

import argparse
import asyncio
import sys
from concurrent.futures import Executor
from typing import Any

import numpy as np
from textual import events
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import ContentSwitcher, Footer, Input

from rtvoice.engine import Settings, SettingsError
from rtvoice.host.messages import Device, Error, Exited, Learned, Notice
from rtvoice.ui import userstate
from rtvoice.ui.fretting import is_fretted, neck_picture
from rtvoice.ui.guard import log_error, ui_log_path
from rtvoice.ui.instrument_editing import FRETTED_CLASS, NECK_TITLE, InstrumentEditing
from rtvoice.ui.keeping import AppGuard
from rtvoice.ui.keyboard import OCTAVE_DOWN, OCTAVE_UP, KeyboardPlayer
from rtvoice.ui.live_picture import LivePicture
from rtvoice.ui.preset_actions import PresetActions
from rtvoice.ui.priority import lower_ui_thread_priority, normal_priority_spawner
from rtvoice.ui.screens.dialogs import AskScreen
from rtvoice.ui.screens.notes import HelpScreen, SafetyScreen
from rtvoice.ui.session import SoundSession, session_for
from rtvoice.ui.sound_editing import SoundEditing
from rtvoice.ui.sync import EngineView
from rtvoice.ui.widgets.bars import HarmonicBars
from rtvoice.ui.widgets.compare_view import CompareView
from rtvoice.ui.widgets.meters import Meters
from rtvoice.ui.widgets.neck_view import PLUCK, NeckView
from rtvoice.ui.widgets.params import PICKUP_COUNT, ParamTable
from rtvoice.ui.widgets.spectrum import SpectrumView
from rtvoice.ui.widgets.status import MessageLine, SoundLine
from rtvoice.ui.widgets.string_view import StringView
from rtvoice.ui.words import display_name

FRAME_RATE_HZ = 30.0
NO_NOTE_DEFAULT = 40  # E2: the note the bars predict for before anything is played
VIEWS = ("harmonics", "spectrum", "compare")
#: Actions of the main screen: while a dialog is in front they wait, and the footer leaves them out.
MAIN_SCREEN_ACTIONS = ("presets", "save", "flip", "copy_slot", "toggle_view", "learn", "help", "survey",
                       "restart_engine", "strings")
FRETTED_ACTIONS = ("strings",)  # shown and working on a fretted instrument only
STRING_TITLE = "string: bridge → nut (▼ pluck, ▒ pickup aperture; ▽ and ⋮ the other slot's)"
PARAMS_TITLE = "parameters (←/→ step, enter types a value)"

APP_CSS = """
Screen { layout: vertical; }
#views { height: 2fr; min-height: 5; border-top: solid $secondary; border-title-align: left; }
StringView { height: 4; border-top: solid $secondary; border-title-align: left; }
StringView:focus { border-top: heavy $accent; }
NeckView { border-top: solid $secondary; border-title-align: left; }
NeckView:focus { border-top: heavy $accent; }
RtvoiceApp.-fretted #views { min-height: 4; }
RtvoiceApp.-fretted ParamTable { min-height: 3; }
ParamTable { height: 1fr; min-height: 4; border-top: solid $secondary; border-title-align: left; }
ParamTable:focus { height: 2fr; border-top: heavy $accent; }
"""


class RtvoiceApp(AppGuard, LivePicture, SoundEditing, InstrumentEditing, PresetActions, App[int]):
    """The instrument's screen. ``link`` is a started :class:`rtvoice.host.link.EngineLink`."""

    TITLE = "rtvoice"
    CSS = APP_CSS
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("ctrl+q", "request_quit", "quit", priority=True),
        Binding("ctrl+c", "request_quit", "quit", show=False, priority=True),  # what a terminal user expects
        Binding("f1", "help", "help"),
        Binding("question_mark", "help", "help", show=False),
        Binding("ctrl+o", "presets", "presets", priority=True),
        Binding("ctrl+s", "save", "save", priority=True),
        Binding("ctrl+t", "flip", "A/B", priority=True),
        Binding("ctrl+y", "copy_slot", "copy slot", show=False, priority=True),
        Binding("ctrl+g", "toggle_view", "view", priority=True),
        Binding("ctrl+l", "learn", "learn", priority=True),
        Binding("ctrl+r", "restart_engine", "restart", show=False, priority=True),
        Binding("f2", "survey", "map"),
        Binding("f3", "strings", "strings"),
    ]

    def __init__(
        self,
        link: Any,
        session: SoundSession | None = None,
        sample_rate_hz: float | None = None,
        frame_rate_hz: float = FRAME_RATE_HZ,
        safety_note: bool | None = None,
        spawner: Executor | None = None,
    ):
        """``safety_note``: None shows the listening note unless it was read before.
        ``spawner``: where engine restarts run (see :mod:`rtvoice.ui.priority`); None: here."""
        super().__init__()
        self.link = link
        if session is None:
            session = SoundSession(getattr(link, "settings", None) or Settings.defaults())
        self.session = session
        config = getattr(link, "config", {}) or {}
        self.sample_rate_hz = float(sample_rate_hz or getattr(link, "rate_hz", None) or config.get("rate") or 48000)
        self.frame_rate_hz = frame_rate_hz
        self.safety_note = safety_note
        self.player = KeyboardPlayer()
        self.engine = EngineView(link)
        self.spawner = spawner
        self.view = VIEWS[0]
        self.learning: str | None = None
        self.last_note = NO_NOTE_DEFAULT
        self.last_place = None  # on a fretted instrument, where the last note the bars followed sounded
        self.neck_selected = PLUCK  # the neck view's element the keys move
        self.frames = 0
        self._predicted_key = None
        self._predicted = np.zeros(0)
        self._compared_key = None
        self._compared = None
        self._snap = None
        self._engine_down_said = False
        self._quit_asked = False
        self._restarting = False
        self._xrun_seen = (0, 0, -1.0)  # xruns and late callbacks last explained, and when (s of UI time)

    # -- layout -------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        s = self.session.settings
        self.sound_line = SoundLine(id="sound")
        self.views = ContentSwitcher(initial="harmonics", id="views")
        self.bars = HarmonicBars(id="harmonics")
        self.spectrum = SpectrumView(id="spectrum")
        self.compare = CompareView(id="compare")
        self.string_view = StringView(s, id="string")
        self.neck_view = NeckView(neck_picture(s, self.engine.places, self.neck_selected), id="neck")
        self.params = ParamTable(s, id="params")
        self.meters = Meters(id="meters")
        self.message_line = MessageLine(id="message")
        # The meters sit right by the bars: a redraw covers the box around everything that
        # changed, so two neighbours that change every frame keep that box small.
        yield self.sound_line
        yield self.meters
        with self.views:
            yield self.bars
            yield self.spectrum
            yield self.compare
        yield self.string_view
        yield self.neck_view
        yield self.params
        yield self.message_line
        yield Footer()

    def on_mount(self) -> None:
        self.string_view.border_title = STRING_TITLE
        self.neck_view.border_title = NECK_TITLE
        self.params.border_title = PARAMS_TITLE
        self._title_views()
        fretted = is_fretted(self.session.settings)
        self.neck_view.display, self.string_view.display = fretted, not fretted
        self.set_class(fretted, FRETTED_CLASS)
        (self.neck_view if fretted else self.string_view).focus()
        self._refresh_sound()
        self.engine.load(self.session.settings, self.say_error)
        self.set_interval(1.0 / self.frame_rate_hz, self._tick)
        show = self.safety_note
        if show is None:
            show = not userstate.safety_note_read()
        self._show_startup()
        self.offer_kept_sound()  # under the listening note, which is read first
        if show:
            self.push_screen(SafetyScreen(), self._safety_read)
        self._tick()

    def _show_startup(self) -> None:
        """The engine's rate and latency on the meters; its start-up problems on the message line."""
        latency = getattr(self.link, "latency", None)
        rate = f"{self.sample_rate_hz / 1000:g} kHz"
        self.meters.show_facts(rate + (f", {latency.text()}" if latency is not None else ""))
        problems = [n for n in getattr(self.link, "startup_notes", []) if not n.startswith("sample rate:")]
        if problems:
            self.say_error("warning: " + "; ".join(problems))

    def _safety_read(self, _result: None) -> None:
        problem = userstate.remember_safety_note()
        if problem:
            self.say_error(f"could not remember that the listening note was read: {problem}")

    # -- messages to the user ----------------------------------------------------
    def say(self, text: str) -> None:
        self.message_line.say(text)

    def say_error(self, text: str) -> None:
        self.message_line.say(f"refused: {text}" if not text.startswith(
            ("refused", "error", "warning")) else text, error=True)

    @property
    def message_text(self) -> str:
        return self.message_line.text

    def _engine_message(self, msg: Notice) -> None:
        match msg:
            case Learned(target=target, cc=cc):
                self.learning = None
                self.session_controls_changed()
                self.say(f"learned: CC{cc} now drives {display_name(target)} (saving the preset keeps it)")
            case Error(text=text) | Exited(text=text):
                self.say_error(f"error: {text}")
            case Device(text=text):
                self.say(text)

    def session_controls_changed(self) -> None:
        controls = self.engine.controls()
        try:
            self.session.set_controls(controls)
        except SettingsError as err:
            self.say_error(str(err))
        self._refresh_sound()

    # -- playing ---------------------------------------------------------------------
    def on_key(self, event: events.Key) -> None:
        if isinstance(self.screen, ModalScreen) or isinstance(self.focused, Input):
            return
        char = event.character or ""
        if event.key == "space":
            self.engine.all_notes_off()
            self.say("all strings muted")
            event.stop()
        elif is_fretted(self.session.settings):
            if self.play_string_key(char):
                event.stop()
        elif char in (OCTAVE_DOWN, OCTAVE_UP):
            self.player.octave(-1 if char == OCTAVE_DOWN else 1)
            self._refresh_line()
            event.stop()
        else:
            note = self.player.note_for(char)
            if note is not None:
                self.engine.note_on(note, self.player.velocity, self.say_error)
                self.last_note = note
                event.stop()

    # -- actions -----------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        """Main-screen actions wait while a dialog is open (quitting always works); the strings' table
        is there only on a fretted instrument."""
        if action in FRETTED_ACTIONS and not is_fretted(self.session.settings):
            return False
        return not (isinstance(self.screen, ModalScreen) and action in MAIN_SCREEN_ACTIONS)

    def action_help(self) -> None:
        s = self.session.settings
        self.push_screen(HelpScreen(self.player, s) if is_fretted(s) else HelpScreen())

    def action_survey(self) -> None:
        from rtvoice.ui.screens.survey import SurveyScreen

        self.push_screen(SurveyScreen(self.session.settings, self.link.snapshot().note))

    def action_toggle_view(self) -> None:
        self.view = VIEWS[(VIEWS.index(self.view) + 1) % len(VIEWS)]
        self.views.current = self.view
        self._tick()

    def action_flip(self) -> None:
        self.session.flip()
        self._use_sound(f"slot {self.session.active} playing")

    def action_copy_slot(self) -> None:
        self.session.copy_to_other()
        other = "B" if self.session.active == "A" else "A"
        self.say(f"slot {self.session.active} copied into slot {other}")

    def action_learn(self) -> None:
        if self.learning:
            self.engine.learn(None, self.say_error)
            self.say(f"learning for {display_name(self.learning)} cancelled")
            self.learning = None
            self._refresh_line()
            return
        name = self._selected_parameter()
        if name is None or name == PICKUP_COUNT:
            self.say_error("choose a parameter first (in the list, on the string or on the neck)")
            return
        if self.engine.learn(name, self.say_error):
            self.learning = name
            self.say(f"learn: move a control on the MIDI device to drive {display_name(name)} (ctrl+l cancels)")
            self._refresh_line()

    def _selected_parameter(self) -> str | None:
        return self.selected_on_instrument() or self.params.selected_name

    async def action_restart_engine(self) -> None:
        if self.engine.alive():
            self.say("the engine is running")
            return
        if self._restarting:
            return
        self.say("restarting the engine...")
        problems: list[str] = []  # collected off the UI thread, shown on it
        self._restarting = True
        try:
            if self.spawner is None:
                ok = self.engine.restart(problems.append)
            else:
                loop = asyncio.get_running_loop()
                ok = await loop.run_in_executor(self.spawner, self.engine.restart, problems.append)
        finally:
            self._restarting = False
        self._xrun_seen = (0, 0, -1.0)  # xruns and late callbacks last explained, and when (s of UI time)
        for text in problems:
            self.say_error(text)
        if ok:
            self.engine.load(self.session.settings, self.say_error)
            self.say("the engine is running again")

    def action_request_quit(self) -> None:
        unsaved = self.session.unsaved_slots()
        if not unsaved:
            self.exit(0)
            return
        if isinstance(self.screen, AskScreen) and self._quit_asked:
            return
        self._quit_asked = True
        names = " and ".join(f"slot {s}" for s in unsaved)

        def done(yes: bool | None) -> None:
            self._quit_asked = False
            if yes:
                self.exit(0)

        verb = "has" if len(unsaved) == 1 else "have"
        question = f"{names[0].upper()}{names[1:]} {verb} unsaved changes. Quit and lose them?"
        self.push_screen(AskScreen(question, "quit", "stay"), done)


def run_ui(link: Any, args: argparse.Namespace | None = None) -> int:
    """Run the UI on a started engine link until the user quits; returns the exit status."""
    settings = getattr(link, "settings", None) or Settings.defaults()
    session = session_for(settings, getattr(args, "preset", None))
    spawner = normal_priority_spawner()
    lower_ui_thread_priority()
    app = RtvoiceApp(link, session, sample_rate_hz=getattr(args, "rate", None), spawner=spawner)
    try:
        result = app.run()
    except Exception as err:  # noqa: BLE001 - Textual itself failed: keep the sound, say so, exit non-zero
        log_error(err, "the UI (fatal)")
        app.keep_unsaved()
        result = None
        app._return_code = 1
    finally:
        spawner.shutdown(wait=False)
    code = app.return_code or 0
    if code:
        kept = f"; the unsaved sound is kept in {app.kept_at} and offered at the next start" if app.kept_at else ""
        sys.stderr.write(f"rtvoice: the UI ended on an error (details in {ui_log_path()}){kept}\n")
        return code
    return int(result or 0)
