"""Helpers for the UI tests: the engine link they drive, screen text, waiting.

The UI tests drive the real :class:`rtvoice.host.link.EngineLink`: the engine runs in
its own process on a silent real-time clock (``audio_device="none"``, ``midi_in="none"``),
exactly as ``rtvoice play --audio-device none`` runs it. Their shared fixtures (``link``, one
engine link a module, and ``home``, a user folder a test) are in ``tests/conftest.py``.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable, Coroutine
from pathlib import Path
from typing import Any, TypeVar

import pytest

from rtvoice.engine.controls import default_entries
from rtvoice.engine.settings import Settings
from rtvoice.host.link import EngineLink

WAIT_S = 10.0

T = TypeVar("T")


def start_link(settings: Settings | None = None) -> EngineLink:
    """A started engine link on the silent clock, with no MIDI input."""
    link = EngineLink(settings or Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    return link


def fresh(link: EngineLink) -> EngineLink:
    """Put a shared link back to the default sound, silent, with the default controller map."""
    link.learn(None)
    link.all_notes_off()
    link.load_settings(Settings.defaults())
    link.set_controls(default_entries())
    link.poll_messages()
    return link


def screen_text(app) -> str:
    """What the terminal shows now, as plain text lines."""
    return "\n".join(strip.text for strip in app.screen._compositor.render_strips())


async def wait_for(pilot, condition: Callable[[], bool], timeout_s: float = WAIT_S) -> bool:
    """Let the app run until ``condition()`` holds; False after ``timeout_s``."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        await pilot.pause(0.05)
    return condition()


def user_home(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A user data folder of the test's own (presets and the remembered listening note)."""
    monkeypatch.setenv("RTVOICE_HOME", str(tmp_path))
    return tmp_path


def run(coro: Coroutine[Any, Any, T]) -> T:
    """Run a test's async body (the app under Textual's pilot) to its end."""
    return asyncio.run(coro)
