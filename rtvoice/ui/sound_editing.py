"""The app's changes to the sound: one value stepped, dragged or typed, the pickup count, a whole
sound after a load or flip. Every change is validated by the session first; only an allowed one
reaches the engine, and a refused one is reported and changes nothing.

A mixin for :class:`rtvoice.ui.app.RtvoiceApp`, which provides ``session``, ``engine``, ``params``,
``push_screen``, ``say``, ``say_error`` and ``_refresh_sound`` (declared in :mod:`rtvoice.ui.app_parts`).
"""

from __future__ import annotations

import math
from typing import Any

from rtvoice.engine import MAX_PICKUPS, Param, SettingsError, apply_assignments, lookup
from rtvoice.ui.app_parts import AppParts
from rtvoice.ui.screens.dialogs import PromptScreen
from rtvoice.ui.stepping import stepped
from rtvoice.ui.widgets.params import PICKUP_COUNT, ParamTable
from rtvoice.ui.widgets.string_view import StringView, clamp_to_range
from rtvoice.ui.words import said_value


class SoundEditing(AppParts):
    """Changing the sound from the string view, the parameter list and typed values."""

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
        self.ask_typed(message.name)

    def ask_typed(self, name: str) -> None:
        """The typed-value prompt for parameter ``name`` (any dotted name, ``strings.<n>.<field>`` too);
        the value is checked as it is typed and applied on enter."""
        if name == PICKUP_COUNT:
            value, hint = str(len(self.session.settings.pickups)), f"1 .. {MAX_PICKUPS}"
        else:
            param, _ = lookup(name)
            value = _typed_form(param, self.session.settings.get(name))
            hint = f"{param.help}  Allowed: {param.describe_range()}"
            if name.endswith((".position", ".width", ".slant")):
                hint += "  (or millimetres, like 120mm)"

        def done(text: str | None) -> None:
            if text is not None:
                self.change_typed(name, text)

        self.push_screen(PromptScreen(f"new value for {name}", value, hint,
                                      check=lambda t: self.check_typed(name, t)), done)


def _typed_form(param: Param, value: Any) -> str:
    """A value as it would be typed back (TOML-like; ``none`` for a string field left to the gauge)."""
    if value is None:
        return "none"
    if param.kind == "shape":
        return "[" + ", ".join(f"[{x:g}, {y:g}]" for x, y in value) + "]"
    if param.kind == "choice":
        return str(value)
    if param.kind == "float":
        return f"{value:.6g}" if math.isfinite(value) else str(value)
    return str(value)
