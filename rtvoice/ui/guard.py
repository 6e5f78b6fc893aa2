"""No error in the UI ends the instrument: handlers report what went wrong and the sound goes on.

Textual ends the whole application when any message handler raises. For an instrument
that is the wrong trade: the engine runs in its own process and keeps playing, and the
user's unsaved sound lives in the UI. :class:`Guarded` wraps a widget's or screen's
message dispatch so that an unexpected error is logged with its traceback, shown on
the message line, and the widget keeps working. What still ends the program (an error
inside Textual itself) exits non-zero, and :mod:`rtvoice.ui.recovery` keeps the sound.
"""

from __future__ import annotations

import os
import time
import traceback
from pathlib import Path
from typing import Any

from textual import events

UI_LOG = "ui.log"


def ui_log_path() -> Path:
    """Where the UI writes the tracebacks of errors it survived: the user log folder
    (``$RTVOICE_HOME`` when set, as for presets)."""
    home = os.environ.get("RTVOICE_HOME")
    if home:
        return Path(home) / UI_LOG
    import platformdirs

    return Path(platformdirs.user_log_dir("rtvoice", appauthor=False)) / UI_LOG


def log_error(err: BaseException, where: str) -> Path | None:
    """Append ``err``'s traceback to the UI log; returns the log's path, or None if it cannot be written."""
    path = ui_log_path()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(f"--- {time.strftime('%Y-%m-%d %H:%M:%S')} in {where}\n")
            fh.write("".join(traceback.format_exception(err)))
    except OSError:
        return None
    return path


class Guarded:
    """Mixin for Textual widgets, screens and the app: a handler's error is reported, not fatal.

    It overrides ``_dispatch_message``, Textual's one entry for every event, message, action
    and key binding of a message pump (checked against Textual 8; a private method, so
    tests/test_ui_errors.py fails loudly if a Textual upgrade renames it). Errors while a widget
    is composed still end the program: a half-built screen is nothing to play on.."""

    async def _dispatch_message(self, message: Any) -> None:
        try:
            # A mixin: the next class in the MRO is Textual's widget, screen or app, unknown here.
            await super()._dispatch_message(message)  # type: ignore[misc]
        except Exception as err:
            if isinstance(message, events.Compose):  # a layout that cannot be built is no screen to play on
                raise  # noqa: BLE001 - any error: report it and keep the instrument playing
            report = getattr(getattr(self, "app", None), "report_unexpected", None)
            if report is None:
                raise
            report(err, f"{type(self).__name__} handling {type(message).__name__}")

