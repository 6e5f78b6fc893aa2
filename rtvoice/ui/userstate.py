"""What the UI remembers between runs: for now, that the listening note was read.

Kept in the per-user data folder (``$RTVOICE_HOME`` when set, as for presets), in
a small TOML file written atomically.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

import tomli_w

from rtvoice.engine import PresetError, write_atomic

STATE_FILE = "ui-state.toml"
SAFETY_KEY = "listening_note_read"


def data_dir() -> Path:
    home = os.environ.get("RTVOICE_HOME")
    if home:
        return Path(home)
    import platformdirs

    return Path(platformdirs.user_data_dir("rtvoice", appauthor=False))


def state_path() -> Path:
    return data_dir() / STATE_FILE


def read_state() -> dict:
    """The remembered values; an unreadable file counts as empty (it is only a reminder)."""
    try:
        return tomllib.loads(state_path().read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):  # deep nesting: garbage
        return {}


def safety_note_read() -> bool:
    return read_state().get(SAFETY_KEY) is True


def remember_safety_note() -> str | None:
    """Record that the note was read; returns an error text if it could not be saved."""
    state = read_state()
    state[SAFETY_KEY] = True
    path = state_path()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_atomic(path, tomli_w.dumps(state).encode("utf-8"))
    except (OSError, PresetError) as err:
        return str(err)
    return None
