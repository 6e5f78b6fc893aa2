"""Unsaved sound kept across a crash: written when the UI ends on an error, offered at the next start.

The file lives in the user data folder (``$RTVOICE_HOME`` when set) as TOML: one table
per slot holding the sound as preset text and the preset it came from. Nothing here
raises for a missing or damaged file: recovery is a courtesy, and a damaged file is
renamed aside (never deleted) so its text stays there for the user.
"""

from __future__ import annotations

import time
import tomllib
from dataclasses import dataclass
from pathlib import Path

import tomli_w

from rtvoice.engine import Settings, SettingsError, presets
from rtvoice.ui.userstate import data_dir

RECOVERY_FILE = "unsaved-sound.toml"


@dataclass(frozen=True)
class KeptSlot:
    """One slot's unsaved sound as it was when the UI ended."""

    slot: str
    settings: Settings
    preset: str = ""
    origin: str = ""
    path: str = ""


def recovery_path() -> Path:
    return data_dir() / RECOVERY_FILE


def keep(slots: list[KeptSlot]) -> Path | None:
    """Write ``slots`` for the next start; returns the file, or None when there was nothing to keep
    or it could not be written (the caller says so: it runs while the program is ending)."""
    if not slots:
        return None
    data = {"written": time.strftime("%Y-%m-%d %H:%M:%S"), "slot": {
        s.slot: {"preset": s.preset, "origin": s.origin, "path": s.path, "sound": presets.preset_text(s.settings)}
        for s in slots}}
    path = recovery_path()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        presets.write_atomic(path, tomli_w.dumps(data).encode("utf-8"))
    except (OSError, presets.PresetError):
        return None
    return path


def kept() -> tuple[list[KeptSlot], str]:
    """The slots kept by an earlier run and when they were written; ([], "") when there are none.

    A file that cannot be read back is moved aside with :func:`set_aside` and counts as none."""
    path = recovery_path()
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return [], ""
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        set_aside()
        return [], ""
    out = []
    for name, entry in sorted((data.get("slot") or {}).items()):
        try:
            settings = presets.preset_from_bytes(str(entry["sound"]).encode("utf-8"), str(path))
        except (KeyError, TypeError, presets.PresetError, SettingsError):
            continue
        out.append(KeptSlot(str(name), settings, str(entry.get("preset", "")), str(entry.get("origin", "")),
                            str(entry.get("path", ""))))
    if not out:
        set_aside()
    return out, str(data.get("written", ""))


def forget() -> None:
    """The kept sound was taken back: remove the file."""
    try:
        recovery_path().unlink()
    except OSError:
        pass


def set_aside() -> Path | None:
    """Rename the file so it is not offered again but stays on disk; returns its new name."""
    path = recovery_path()
    target = path.with_name(f"unsaved-sound-{time.strftime('%Y%m%d-%H%M%S')}.toml")
    try:
        path.rename(target)
    except OSError:
        return None
    return target
