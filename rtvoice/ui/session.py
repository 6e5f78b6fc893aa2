"""The sound being edited: two slots (A and B), each with the preset it came from.

No Textual here: the app asks this object to change values, load, save and flip,
and then tells the engine and the widgets. Every change is validated as a whole
by :class:`~rtvoice.engine.settings.Settings`; a refused change leaves everything
as it was.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, fields, replace
from typing import Any

from rtvoice.engine import Settings, apply_assignments, presets

SLOT_NAMES = ("A", "B")


@dataclass(frozen=True)
class Slot:
    """One sound: its settings and the preset they are compared with."""

    settings: Settings
    preset: str = ""  # name of the preset this sound was loaded from or saved as
    origin: str = ""  # "factory", "user", "file" or "" (never saved)
    saved: Settings | None = None  # that preset's settings as last read or written
    path: str = ""  # the preset's file, for revert

    @property
    def dirty(self) -> bool:
        """True when the sound or its controller map differs from the saved preset."""
        base = self.saved if self.saved is not None else Settings.defaults()
        if self.saved is None and self.preset:
            return True
        if self.settings.differences(base):
            return True
        return controls_of(self.settings) != controls_of(base)


def has_controls() -> bool:
    """Whether Settings carries a controller map (saved with the preset as [[control]] tables)."""
    return "controls" in {f.name for f in fields(Settings)}


def controls_of(settings: Settings) -> tuple:
    """The controller map of ``settings`` as comparable tuples (empty when it has none)."""
    entries = getattr(settings, "controls", None) or ()
    return tuple(tuple(sorted(dict(e).items())) for e in entries)


class SoundSession:
    """Slots A and B; one of them is the sound the engine plays."""

    def __init__(self, settings: Settings, preset: str = "", origin: str = "",
                 saved: Settings | None = None, path: str = ""):
        first = Slot(settings, preset, origin, saved, path)
        self.slots: dict[str, Slot] = {"A": first, "B": first}
        self.active = "A"
        self.notes: list[str] = []  # warnings of the last preset read (see load_info)

    # -- reading ------------------------------------------------------------------
    @property
    def slot(self) -> Slot:
        return self.slots[self.active]

    @property
    def settings(self) -> Settings:
        return self.slot.settings

    @property
    def dirty(self) -> bool:
        return self.slot.dirty

    def unsaved_slots(self) -> list[str]:
        """Slots whose sound would be lost on quitting (B only counts when it differs from A)."""
        out = [n for n in SLOT_NAMES if self.slots[n].dirty]
        a, b = self.slots["A"], self.slots["B"]
        if "B" in out and "A" in out and not a.settings.differences(b.settings):
            out.remove("B" if self.active == "A" else "A")
        return out

    # -- changing the sound -------------------------------------------------------
    def _put(self, slot: Slot) -> None:
        self.slots[self.active] = slot

    def set_values(self, changes: dict[str, Any], source: str = "ui") -> Settings:
        """Apply validated changes to the active slot; SettingsError leaves it unchanged."""
        new = self.settings.with_values(changes, source)
        self._put(replace(self.slot, settings=new))
        return new

    def set_typed(self, name: str, text: str) -> Settings:
        """Apply a typed value (TOML syntax, or a bare word; ``mm`` after a position or width)."""
        new = apply_assignments(self.settings, [f"{name}={text}"], source="typed value")
        self._put(replace(self.slot, settings=new))
        return new

    def set_pickup_count(self, n: int) -> Settings:
        new = self.settings.with_pickup_count(n)
        self._put(replace(self.slot, settings=new))
        return new

    def set_controls(self, entries: list[dict]) -> Settings:
        """Store the engine's controller map in the active sound, so it is saved with the preset."""
        if not has_controls():
            return self.settings
        new = replace(self.settings, controls=tuple(dict(e) for e in entries))
        self._put(replace(self.slot, settings=new))
        return new

    def restore(self, name: str, settings: Settings, preset: str = "", origin: str = "", path: str = "") -> None:
        """Put a sound kept from an earlier run into slot ``name``; it shows as unsaved."""
        saved = None
        if path:
            try:
                saved = self._read(path)
            except (presets.PresetError, ValueError):  # the preset went away: the sound is all there is
                saved, preset, origin, path = None, "", "", ""
        self.slots[name] = Slot(settings, preset, origin, saved, path)

    def flip(self) -> Settings:
        """Make the other slot the sound being played and edited."""
        self.active = "B" if self.active == "A" else "A"
        return self.settings

    def copy_to_other(self) -> None:
        """Put the active sound (and its preset link) into the other slot too."""
        other = "B" if self.active == "A" else "A"
        self.slots[other] = self.slot

    # -- presets ------------------------------------------------------------------
    def load(self, name_or_path: str) -> Settings:
        """Load a preset by name or path into the active slot (errors leave it unchanged)."""
        return self.load_info(presets.find_preset(name_or_path))

    def load_info(self, info: presets.PresetInfo) -> Settings:
        """Load the preset file ``info`` names (PresetError / SettingsError change nothing).

        What the file's :class:`~rtvoice.engine.presets.PresetWarning` says (keys from a
        newer rtvoice left out) and its :class:`~rtvoice.engine.PresetFormatNotice` (fractions
        from before positions were in mm) are kept in :attr:`notes` for the screen to show.
        """
        settings = self._read(info.path)
        self._put(Slot(settings, info.name, info.origin, settings, str(info.path)))
        return settings

    def _read(self, path) -> Settings:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", presets.PresetWarning)
            warnings.simplefilter("always", presets.PresetFormatNotice)
            settings = presets.read_preset_file(path)
        told = (presets.PresetWarning, presets.PresetFormatNotice)
        self.notes = [str(w.message) for w in caught if issubclass(w.category, told)]
        return settings

    def save(self, name: str | None = None, description: str | None = None) -> str:
        """Save the active sound as user preset ``name`` (default: the one it came from).

        Factory presets are refused by :func:`rtvoice.engine.presets.save_preset`; the
        write is atomic. Returns the path written.
        """
        name = name or self.slot.preset
        if not name:
            raise presets.PresetError("this sound has no preset name yet: use save as")
        if self.slot.origin == "factory" and name == self.slot.preset:
            raise presets.PresetError(f"{name!r} is a factory preset and cannot be overwritten: "
                                      "save it under another name")
        sound = self.settings if description is None else self.settings.renamed(self.settings.name, description)
        path = presets.save_preset(sound, name)
        stored = sound.renamed(name)
        self._put(Slot(stored, name, "user", stored, str(path)))
        return str(path)

    def revert(self) -> Settings:
        """Go back to the saved preset of the active slot (re-read from disk)."""
        slot = self.slot
        if not slot.path:
            settings = Settings.defaults()
            self._put(Slot(settings))
            return settings
        settings = self._read(slot.path)
        self._put(Slot(settings, slot.preset, slot.origin, settings, slot.path))
        return settings

    def rename(self, old: str, new: str) -> str:
        path_text = str(presets.rename_preset(old, new))
        for key, slot in self.slots.items():
            if slot.preset == old and slot.origin == "user":
                saved = None if slot.saved is None else slot.saved.renamed(new)
                self.slots[key] = replace(slot, preset=new, settings=slot.settings.renamed(new),
                                          path=path_text, saved=saved)
        return path_text

    def delete(self, name: str) -> None:
        presets.delete_preset(name)
        for key, slot in self.slots.items():
            if slot.preset == name and slot.origin == "user":
                self.slots[key] = replace(slot, preset="", origin="", saved=None, path="")


def session_for(settings: Settings, preset: str | None) -> SoundSession:
    """The session for a sound the engine already plays, started from ``preset`` (name or path).

    The preset file is read again as the saved version, so changes made on the
    command line (``--set``) show as unsaved.
    """
    if not preset:
        return SoundSession(settings)
    try:
        info = presets.find_preset(preset)
        saved = presets.read_preset_file(info.path)
    except (presets.PresetError, ValueError):
        return SoundSession(settings)
    return SoundSession(settings, info.name, info.origin, saved, str(info.path))
