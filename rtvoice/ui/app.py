"""The terminal UI application: wires the widgets to the sound session and the engine link.

Data flows one way: the app reads the engine's snapshot about 30 times a second
and hands each widget what it shows; widgets ask for changes with messages; the
app validates them through :class:`~rtvoice.ui.session.SoundSession` and only
then tells the engine. A refused change is reported and changes nothing.
"""

from __future__ import annotations

import argparse
import asyncio
import math
import sys
from concurrent.futures import Executor
from typing import Any

import numpy as np
from textual import events
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import ContentSwitcher, Footer, Input

from rtvoice.engine import Settings, SettingsError, apply_assignments
from rtvoice.engine.schema import MAX_PICKUPS, lookup
from rtvoice.host.messages import Device, Error, Exited, Learned, Notice
from rtvoice.physics.modes import unstiffened_f0_hz
from rtvoice.ui import userstate
from rtvoice.ui.compare import SlotComparison, compare_slots
from rtvoice.ui.format import note_name
from rtvoice.ui.guard import log_error, ui_log_path
from rtvoice.ui.keeping import AppGuard
from rtvoice.ui.keyboard import OCTAVE_DOWN, OCTAVE_UP, KeyboardPlayer
from rtvoice.ui.prediction import predicted_levels_db
from rtvoice.ui.preset_actions import PresetActions
from rtvoice.ui.priority import lower_ui_thread_priority, normal_priority_spawner
from rtvoice.ui.screens.dialogs import AskScreen, PromptScreen
from rtvoice.ui.screens.notes import HelpScreen, SafetyScreen
from rtvoice.ui.session import SoundSession, session_for
from rtvoice.ui.stepping import stepped
from rtvoice.ui.sync import EngineView
from rtvoice.ui.widgets.bars import HarmonicBars
from rtvoice.ui.widgets.compare_view import CompareView
from rtvoice.ui.widgets.meters import Meters
from rtvoice.ui.widgets.params import PICKUP_COUNT, ParamTable
from rtvoice.ui.widgets.spectrum import SpectrumView
from rtvoice.ui.widgets.status import MessageLine, SoundLine
from rtvoice.ui.widgets.string_view import StringView, clamp_to_range
from rtvoice.ui.words import display_name, said_value, xrun_note

FRAME_RATE_HZ = 30.0
METER_EVERY = 3  # numbers are read, not watched: 10 updates a second are plenty
XRUN_NOTE_EVERY_S = 5.0  # a climbing xrun count is explained at most this often
STARTUP_XRUNS_S = 2.0  # xruns in the UI's first seconds (the stream starting) are counted, not explained
PREDICTED_MIN = 32  # harmonics predicted even when fewer fit on screen
NO_NOTE_DEFAULT = 40  # E2: the note the bars predict for before anything is played
VIEWS = ("harmonics", "spectrum", "compare")
#: Actions of the main screen: while a dialog is in front they wait, and the footer leaves them out.
MAIN_SCREEN_ACTIONS = ("presets", "save", "flip", "copy_slot", "toggle_view", "learn", "help", "survey",
                       "restart_engine")
STRING_TITLE = "string: bridge → nut (▼ pluck, ▒ pickup aperture; ▽ and ⋮ the other slot's)"
PARAMS_TITLE = "parameters (←/→ step, enter types a value)"

APP_CSS = """
Screen { layout: vertical; }
#views { height: 2fr; min-height: 5; border-top: solid $secondary; border-title-align: left; }
StringView { height: 4; border-top: solid $secondary; border-title-align: left; }
StringView:focus { border-top: heavy $accent; }
ParamTable { height: 1fr; min-height: 4; border-top: solid $secondary; border-title-align: left; }
ParamTable:focus { height: 2fr; border-top: heavy $accent; }
"""


class RtvoiceApp(AppGuard, PresetActions, App[int]):
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
        self.frames = 0
        self._predicted_key: tuple | None = None
        self._predicted = np.zeros(0)
        self._compared_key: tuple | None = None
        self._compared: SlotComparison | None = None
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
        yield self.params
        yield self.message_line
        yield Footer()

    def on_mount(self) -> None:
        self.string_view.border_title = STRING_TITLE
        self.params.border_title = PARAMS_TITLE
        self._title_views()
        self.string_view.focus()
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

    def _title_views(self, caption: str = "") -> None:
        if self.view == "harmonics":
            title = f"harmonics {caption} — █ live, │ predicted at the attack"
        elif self.view == "compare":
            title = f"A/B {caption} — █ slot A, │ slot B, predicted at the attack (playing: {self.session.active})"
        else:
            title = f"output spectrum {caption} — ^ marks the harmonics"
        if self.views.border_title != title:  # an unchanged title must not cost a repaint
            self.views.border_title = title

    # -- messages to the user ----------------------------------------------------
    def say(self, text: str) -> None:
        self.message_line.say(text)

    def say_error(self, text: str) -> None:
        self.message_line.say(f"refused: {text}" if not text.startswith(
            ("refused", "error", "warning")) else text, error=True)

    @property
    def message_text(self) -> str:
        return self.message_line.text

    # -- the live picture ----------------------------------------------------------
    def _tick(self) -> None:
        try:
            self._tick_once()
        except Exception as err:  # noqa: BLE001 - a timer that raises would stop; the picture must go on
            self.report_unexpected(err, "the live picture")

    def _tick_once(self) -> None:
        if self._restarting:  # the link is being rebuilt on another thread: leave it alone
            return
        self.frames += 1
        snap = self.engine.snapshot()
        for msg in self.engine.messages():
            self._engine_message(msg)
        moved = self.engine.moved_values(self.session.settings)
        if moved:
            try:
                self.session.set_values(moved, source="controller")
            except SettingsError:
                pass
            else:
                self._refresh_sound()
        if self.frames % METER_EVERY == 0 or not snap.engine_alive:
            self.meters.show_snapshot(snap)
            self._explain_xruns(snap)
        if not snap.engine_alive:
            if not self._engine_down_said:
                self._engine_down_said = True
                self.say_error("error: the engine has stopped; press ctrl+r to restart it")
        else:
            self._engine_down_said = False
        self._snap = snap
        self._draw_live(snap)

    def _explain_xruns(self, snap) -> None:
        """When the xrun count climbs, say why: rtvoice's own callback overran its period (``late``
        climbed too), or it finished in time and the machine or the audio server held it up."""
        xruns, late = int(getattr(snap, "xruns", 0)), int(getattr(snap, "late", 0))
        seen_xruns, seen_late, said_at = self._xrun_seen
        if xruns <= seen_xruns:
            return
        now = self.frames / self.frame_rate_hz
        if said_at < 0 and now < STARTUP_XRUNS_S:  # a stream's first periods often drop one: not news
            self._xrun_seen = (xruns, late, -1.0)
            return
        if now - said_at < XRUN_NOTE_EVERY_S and said_at >= 0:
            return  # the count keeps climbing on the meters; the reason is said now and then
        self.say_error(xrun_note(xruns - seen_xruns, xruns, late - seen_late))
        self._xrun_seen = (xruns, late, now)

    def _draw_live(self, snap) -> None:
        """Bars (or spectrum), their title and the top line, from ``snap`` and the sound now set."""
        if snap is None:
            return
        note = snap.note if snap.note >= 0 else self.last_note
        f0 = None
        if snap.note >= 0 and snap.f0_hz > 0:  # the host reports the first partial, bend included
            f0 = unstiffened_f0_hz(snap.f0_hz, self.session.settings.get("string.inharmonicity"))
        if self.view == "harmonics":
            bars = self.bars
            # The prediction is for the loudest voice's own velocity (the keyboard's before any note).
            velocity = int(getattr(snap, "velocity", 0) or self.player.velocity)
            n = max(PREDICTED_MIN, bars.harmonics_shown())
            predicted = self._predicted_for(note, f0, n, velocity)
            live = None
            if snap.note >= 0:
                live = self.engine.live_levels_db(self.session.settings, snap)
            bars.show_levels(live, predicted)
        elif self.view == "compare":
            velocity = int(getattr(snap, "velocity", 0) or self.player.velocity)
            self.compare.show_comparison(self._comparison_for(note, max(PREDICTED_MIN,
                                                                        self.compare.harmonics_shown()), velocity))
        else:
            marks = snap.mode_freqs_hz if snap.note >= 0 else None
            nyquist_hz = self.sample_rate_hz / 2
            self.spectrum.show_spectrum(snap.spectrum_db, snap.spectrum_bin_hz, marks, nyquist_hz)
        caption = f"of {note_name(note)}" + ("" if snap.note >= 0 else " (last note; none ringing)")
        self._title_views(caption)
        self._refresh_line(snap.note)

    def _comparison_for(self, note: int, n: int, velocity: int) -> SlotComparison:
        """Slots A and B predicted for one note, recomputed only when a sound, the note or the size changes."""
        a, b = self.session.slots["A"].settings, self.session.slots["B"].settings
        key = (id(a), id(b), note, n, velocity)
        if key != self._compared_key or self._compared is None:
            self._compared_key = key
            self._compared = compare_slots(a, b, note, n, velocity, self.sample_rate_hz)
        return self._compared

    def _predicted_for(self, note: int, f0_hz: float | None, n: int, velocity: int) -> np.ndarray:
        """Predicted attack levels, recomputed only when the sound, note or size changes."""
        settings = self.session.settings
        f0_key = None if f0_hz is None else round(f0_hz, 3)
        key = (id(settings), note, f0_key, n, velocity)
        if key != self._predicted_key:
            self._predicted_key = key
            self._predicted = predicted_levels_db(settings, note, n, velocity, f0_hz, self.sample_rate_hz)
        return self._predicted

    def _refresh_line(self, note: int = -1) -> None:
        slot = self.session.slot
        self.sound_line.show(
            preset=slot.preset, origin=slot.origin, dirty=slot.dirty, slot=self.session.active,
            octave=self.player.shift, note=note, learning=self.learning,
        )

    def _refresh_sound(self) -> None:
        """Hand the current settings to every widget that draws them."""
        s = self.session.settings
        other = self.session.slots["B" if self.session.active == "A" else "A"].settings
        self.string_view.show_settings(s, other)
        self.params.show_settings(s, self.engine.controls())
        self._refresh_line()
        self._draw_live(self._snap)

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

    # -- changing the sound ----------------------------------------------------------
    def change(self, name: str, value: Any) -> bool:
        """Validate and apply one parameter change; tell the engine only if it was allowed."""
        try:
            self.session.set_values({name: value})
        except SettingsError as err:
            self.say_error(str(err))
            return False
        self.engine.set_value(name, self.session.settings.get(name), self.say_error)
        self._refresh_sound()
        return True

    def change_typed(self, name: str, text: str) -> None:
        if name == PICKUP_COUNT:
            self._set_pickup_count(int(text))
            return
        try:
            self.session.set_typed(name, text)
        except SettingsError as err:
            self.say_error(str(err))
            return
        self.engine.set_value(name, self.session.settings.get(name), self.say_error)
        s = self.session.settings
        self.say(said_value(name, s.get(name), s.get("string.scale_length_mm")))
        self._refresh_sound()

    def check_typed(self, name: str, text: str) -> str | None:
        """The reason a typed value would be refused, or None (nothing is changed here)."""
        if name == PICKUP_COUNT:
            if not text.isdigit() or not 1 <= int(text) <= MAX_PICKUPS:
                return f"pickup count must be a whole number 1..{MAX_PICKUPS}, got {text!r}"
            return None
        try:
            apply_assignments(self.session.settings, [f"{name}={text}"], source="typed value")
        except SettingsError as err:
            return str(err)
        return None

    def _set_pickup_count(self, n: int) -> None:
        try:
            self.session.set_pickup_count(n)
        except SettingsError as err:
            self.say_error(str(err))
            return
        self.engine.load(self.session.settings, self.say_error)
        self.say(f"{n} pickup{'s' if n > 1 else ''}")
        self._refresh_sound()

    def sound_restored(self, what: str) -> None:
        self._use_sound(what)

    def _use_sound(self, what: str) -> None:
        """Send the whole current sound to the engine after a load, revert or flip."""
        self.engine.load(self.session.settings, self.say_error)
        self._refresh_sound()
        self.say(what)

    def on_string_view_move_requested(self, message: StringView.MoveRequested) -> None:
        self.change(message.name, message.value)

    def on_string_view_nudge_requested(self, message: StringView.NudgeRequested) -> None:
        """A step in mm from the sound's value now (not the widget's last picture of it)."""
        s = self.session.settings
        value = s.get(message.name) + message.delta_mm / s.get("string.scale_length_mm")
        self.change(message.name, clamp_to_range(message.name, value))

    def on_string_view_selected(self, message: StringView.Selected) -> None:
        self.params.select_name(message.element.position_name)

    def on_param_table_step_requested(self, message: ParamTable.StepRequested) -> None:
        if message.name == PICKUP_COUNT:
            self._set_pickup_count(len(self.session.settings.pickups) + message.direction)
            return
        param, _ = lookup(message.name)
        if param.kind == "shape":
            self.say("a shape has no step: press enter and type a list of [x, y] points")
            return
        current = self.session.settings.get(message.name)
        self.change(message.name, stepped(param, current, message.direction, message.fine))

    def on_param_table_edit_requested(self, message: ParamTable.EditRequested) -> None:
        name = message.name
        if name == PICKUP_COUNT:
            value, hint = str(len(self.session.settings.pickups)), f"1 .. {MAX_PICKUPS}"
        else:
            param, _ = lookup(name)
            value = _typed_form(param, self.session.settings.get(name))
            hint = f"{param.help}  Allowed: {param.describe_range()}"
            if name.endswith((".position", ".width")):
                hint += "  (or millimetres, like 120mm)"

        def done(text: str | None) -> None:
            if text is not None:
                self.change_typed(name, text)

        self.push_screen(PromptScreen(f"new value for {name}", value, hint,
                                      check=lambda t: self.check_typed(name, t)), done)

    # -- playing ---------------------------------------------------------------------
    def on_key(self, event: events.Key) -> None:
        if isinstance(self.screen, ModalScreen) or isinstance(self.focused, Input):
            return
        char = event.character or ""
        if event.key == "space":
            self.engine.all_notes_off()
            self.say("all strings muted")
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
        """Main-screen actions wait while a dialog is open (quitting always works)."""
        return not (isinstance(self.screen, ModalScreen) and action in MAIN_SCREEN_ACTIONS)

    def action_help(self) -> None:
        self.push_screen(HelpScreen())

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
            self.say_error("choose a parameter first (in the list or on the string)")
            return
        if self.engine.learn(name, self.say_error):
            self.learning = name
            self.say(f"learn: move a control on the MIDI device to drive {display_name(name)} (ctrl+l cancels)")
            self._refresh_line()

    def _selected_parameter(self) -> str | None:
        if isinstance(self.focused, StringView):
            return self.focused.element.position_name
        return self.params.selected_name

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

        def done(yes: bool) -> None:
            self._quit_asked = False
            if yes:
                self.exit(0)

        verb = "has" if len(unsaved) == 1 else "have"
        question = f"{names[0].upper()}{names[1:]} {verb} unsaved changes. Quit and lose them?"
        self.push_screen(AskScreen(question, "quit", "stay"), done)


def _typed_form(param, value: Any) -> str:
    """A value as it would be typed back (TOML-like)."""
    if param.kind == "shape":
        return "[" + ", ".join(f"[{x:g}, {y:g}]" for x, y in value) + "]"
    if param.kind == "choice":
        return str(value)
    if param.kind == "float":
        return f"{value:.6g}" if math.isfinite(value) else str(value)
    return str(value)


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
