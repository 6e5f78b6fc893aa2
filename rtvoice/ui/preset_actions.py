"""Preset actions of the app: save, save as, and what the preset list asks for
(load, rename, delete with confirmation, revert). Every file operation goes through
:class:`~rtvoice.ui.session.SoundSession` and :mod:`rtvoice.engine.presets` (atomic saves,
factory presets read-only); a failure is reported and leaves the sound as it was.

A mixin for :class:`rtvoice.ui.app.RtvoiceApp`, which provides ``session``, ``say``,
``say_error``, ``_use_sound``, ``_refresh_sound`` and ``push_screen`` (declared in
:mod:`rtvoice.ui.app_parts`).
"""

from __future__ import annotations

from collections.abc import Callable

from rtvoice.engine import SettingsError, presets
from rtvoice.ui.app_parts import AppParts
from rtvoice.ui.screens.dialogs import AskScreen, PromptScreen
from rtvoice.ui.screens.presets import PresetChoice, PresetScreen


class PresetActions(AppParts):
    """Save and manage presets from the UI."""

    def action_save(self) -> None:
        slot = self.session.slot
        if not slot.preset or slot.origin != "user":
            self._save_as()
            return
        self._save(slot.preset)

    def _save(self, name: str, description: str | None = None) -> None:
        try:
            path = self.session.save(name, description)
        except (presets.PresetError, SettingsError) as err:
            self.say_error(str(err))
            return
        self._refresh_sound()
        self.say(f"saved {path}")

    def _save_as(self) -> None:
        suggestion = self.session.slot.preset
        if self.session.slot.origin == "factory":
            suggestion = f"{suggestion}-mine"

        def check(text: str) -> str | None:
            try:
                presets.check_name(text)
            except presets.PresetError as err:
                return str(err)
            if (presets.FACTORY_DIR / f"{text}.toml").is_file():
                return f"{text!r} is a factory preset (read-only): choose another name"
            return None

        def described(name: str, description: str | None) -> None:
            if description is None:  # escape: nothing saved
                return
            exists = (presets.user_dir() / f"{name}.toml").is_file()
            if exists and name != self.session.slot.preset:
                ask = AskScreen(f"A user preset named {name!r} exists. Replace it?",
                                "replace", "keep it")
                self.push_screen(ask, lambda yes: self._save(name, description) if yes else None)
            else:
                self._save(name, description)

        def named(name: str | None) -> None:
            if name is None:
                return
            # The copy's description is the user's to write: the old one may describe another placement.
            self.push_screen(PromptScreen(f"description of {name}", self.session.settings.description,
                                          "what this sound is: where its pluck and pickups sit, what it is for"),
                             lambda text: described(name, text))

        self.push_screen(PromptScreen("save the sound as a user preset", suggestion,
                                      "letters, digits, - and _", check=check), named)

    def action_presets(self) -> None:
        screen = PresetScreen(presets.list_presets(), self.session.slot.preset)
        self.push_screen(screen, self._preset_chosen)

    def _preset_chosen(self, choice: PresetChoice | None) -> None:
        if choice is None:
            return
        if choice.action == "load":
            self._confirm_discard(f"load {choice.name}", lambda: self._load(choice))
        elif choice.action == "save_as":
            self._save_as()
        elif choice.action == "revert":
            self._confirm_discard("revert", self._revert)
        elif choice.action == "delete":
            self._delete(choice)
        elif choice.action == "rename":
            self._rename(choice)

    def _confirm_discard(self, what: str, then: Callable[[], None]) -> None:
        if not self.session.dirty:
            then()
            return
        name = self.session.slot.preset or "the unsaved sound"
        self.push_screen(AskScreen(f"Slot {self.session.active} ({name}) has unsaved changes. "
                                   f"{what} and lose them?", what, "cancel"),
                         lambda yes: then() if yes else None)

    def _load(self, choice: PresetChoice) -> None:
        if choice.info is None:  # the preset list refuses "load" with nothing chosen; nothing to load
            self.say_error("no preset chosen")
            return
        try:
            self.session.load_info(choice.info)
        except (presets.PresetError, SettingsError) as err:
            self.say_error(str(err))
            return
        self._use_sound(f"loaded {choice.name} ({choice.origin})")
        for note in self.session.notes:  # e.g. keys from a newer rtvoice, left out
            self.say_error(f"warning: {note}")

    def _revert(self) -> None:
        try:
            self.session.revert()
        except (presets.PresetError, SettingsError) as err:
            self.say_error(str(err))
            return
        self._use_sound(f"reverted to {self.session.slot.preset or 'the defaults'}")
        for note in self.session.notes:
            self.say_error(f"warning: {note}")

    def _delete(self, choice: PresetChoice) -> None:
        if choice.origin == "factory":
            self.say_error(f"{choice.name!r} is a factory preset and cannot be deleted")
            return

        def done(yes: bool | None) -> None:
            if not yes:
                return
            try:
                self.session.delete(choice.name)
            except presets.PresetError as err:
                self.say_error(str(err))
                return
            self._refresh_sound()
            self.say(f"deleted user preset {choice.name}")

        self.push_screen(AskScreen(f"Delete user preset {choice.name!r}? This cannot be undone.",
                                   "delete", "keep"), done)

    def _rename(self, choice: PresetChoice) -> None:
        if choice.origin == "factory":
            self.say_error(f"{choice.name!r} is a factory preset and cannot be renamed: "
                           "save it as a user preset")
            return

        def check(text: str) -> str | None:
            try:
                presets.check_name(text)
            except presets.PresetError as err:
                return str(err)
            return None

        def done(new: str | None) -> None:
            if not new or new == choice.name:
                return
            try:
                self.session.rename(choice.name, new)
            except presets.PresetError as err:
                self.say_error(str(err))
                return
            self._refresh_sound()
            self.say(f"renamed {choice.name} to {new}")

        prompt = PromptScreen(f"rename user preset {choice.name}", choice.name, check=check)
        self.push_screen(prompt, done)

