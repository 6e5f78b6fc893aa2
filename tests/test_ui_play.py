"""Playing and the engine from the UI: the computer keyboard, mute, controller learn through
the engine, the first-start listening note, the help screen, an engine that dies, resizing."""

from __future__ import annotations

import os
import signal
import threading
import tomllib

import pytest
from support.ui import fresh, run, screen_text, start_link, wait_for

from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.keyboard import ROWS
from rtvoice.ui.priority import lower_ui_thread_priority, normal_priority_spawner
from rtvoice.ui.screens.dialogs import PromptScreen
from rtvoice.ui.screens.notes import HelpScreen, SafetyScreen

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)


def test_keys_pluck_notes_octave_keys_shift_them_and_space_mutes_everything(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            seen = []
            await pilot.press("a")  # second row, open string: A2
            seen.append(await wait_for(pilot, lambda: app._snap.note == 45))
            await pilot.press("greater_than_sign", "z")  # an octave up, bottom row open: E3
            seen.append(await wait_for(pilot, lambda: app._snap.note == 52))
            rings_without_release = app._snap.voices >= 1  # no key release was ever sent
            line = screen_text(app).splitlines()[0]
            await pilot.press("space")
            silent = await wait_for(pilot, lambda: app._snap.voices == 0)
            return seen, rings_without_release, line, silent, app.message_text

    seen, rings, line, silent, message = run(body())
    assert seen == [True, True]
    assert rings
    assert "oct +1" in line
    assert silent and message == "all strings muted"


def test_learn_maps_the_next_controller_sent_through_the_engine_and_saves_it_with_the_preset(link, home):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("down", "ctrl+l")  # pickup 1 on the string, then learn
            learning_line = screen_text(app).splitlines()[0]
            link.send_midi(0xB2, 80, 64)  # CC80 on MIDI channel 3, as from a MIDI input
            learned = await wait_for(pilot, lambda: app.message_text.startswith("learned"))
            learned_message = app.message_text
            app.params.select_name("pickup.0.position")
            await pilot.pause()
            table_text = screen_text(app)
            link.send_midi(0xB2, 80, 127)  # the controller now drives the pickup
            moved = await wait_for(pilot, lambda: app.session.settings.get("pickup.0.position") == 0.995)
            await pilot.press("ctrl+s")
            assert isinstance(app.screen, PromptScreen)
            await pilot.press(*"with-cc80", "enter")
            await pilot.pause()
            await pilot.press("enter")  # the description, as it is
            await pilot.pause()
            return learning_line, learned, learned_message, table_text, moved, app.string_view.settings

    learning_line, learned, message, table, moved, drawn = run(body())
    assert "LEARN pickup 1 position" in learning_line  # pickups counted from 1, as on the string view
    assert learned and "CC80" in message and "pickup 1 position" in message
    row = next(line for line in table.splitlines() if "position" in line and "pickup 1" in line)
    assert "CC80 ch3" in row
    assert moved and drawn.get("pickup.0.position") == 0.995  # the string is redrawn there too
    saved = tomllib.loads((home / "presets" / "with-cc80.toml").read_text())
    assert {"target": "pickup.0.position", "source": "cc", "cc": 80, "bits": 7, "channel": 3,
            "low": 0.005, "high": 0.995, "curve": "linear"} in saved["control"]


def test_the_listening_note_shows_on_first_start_only(link, home):
    async def first():
        app = RtvoiceApp(fresh(link))
        async with app.run_test(size=(80, 24)) as pilot:
            shown = await wait_for(pilot, lambda: isinstance(app.screen, SafetyScreen))
            text = str(app.screen.query_one("#safety-text").render())
            await pilot.press("enter")
            await pilot.pause()
            return shown, text, isinstance(app.screen, SafetyScreen)

    async def second():
        app = RtvoiceApp(fresh(link))
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.5)
            return isinstance(app.screen, SafetyScreen)

    shown, text, still = run(first())
    assert shown and not still
    assert "-1 dBFS" in text and "turned down" in text
    assert (home / "ui-state.toml").is_file()
    assert run(second()) is False


def test_the_help_screen_lists_the_keys_and_the_keyboard_rows(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("f1")
            shown = isinstance(app.screen, HelpScreen)
            text = screen_text(app)
            await pilot.press("escape")
            return shown, text, isinstance(app.screen, HelpScreen)

    shown, text, still = run(body())
    assert shown and not still
    for keys, _ in ROWS:
        assert " ".join(keys) in text
    for key in ("ctrl+q", "ctrl+o", "ctrl+s", "ctrl+t", "ctrl+l", "space", "< >"):
        assert key in text


def test_when_the_engine_dies_the_ui_says_so_and_restarts_it():
    """The restart runs on the helper thread run_ui uses (it keeps the normal priority)."""
    link = start_link()
    spawner = normal_priority_spawner()
    try:
        async def body():
            app = RtvoiceApp(link, safety_note=False, spawner=spawner)
            async with app.run_test(size=(80, 24)) as pilot:
                await pilot.pause()
                os.kill(link.ready_info.pid, signal.SIGKILL)
                said = await wait_for(pilot, lambda: "engine has stopped" in app.message_text)
                await pilot.press("ctrl+r")
                back = await wait_for(pilot, lambda: link.alive() and app._snap.engine_alive)
                await pilot.press("z")
                plays = await wait_for(pilot, lambda: app._snap.note == 40)
                return said, back, plays

        result = {}

        def ui_thread():  # niced as run_ui nices the UI thread
            result["ui_nice"] = lower_ui_thread_priority()
            result["out"] = run(body())

        thread = threading.Thread(target=ui_thread)
        thread.start()
        thread.join(60)
        said, back, plays = result["out"]
        assert said and back and plays
        # The UI thread was niced; the restarted engine was not (it came from the helper thread).
        normal = os.getpriority(os.PRIO_PROCESS, 0)
        assert result["ui_nice"] is None or result["ui_nice"] > normal
        assert os.getpriority(os.PRIO_PROCESS, link.ready_info.pid) == normal
    finally:
        spawner.shutdown()
        link.close()


def test_a_resize_redraws_with_as_many_harmonics_as_fit(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            small = (app.bars.harmonics_shown(), app.bars.predicted_db.size)
            await pilot.resize_terminal(140, 40)
            await wait_for(pilot, lambda: app.bars.predicted_db.size >= app.bars.harmonics_shown() > 60)
            return small, (app.bars.harmonics_shown(), app.bars.predicted_db.size), screen_text(app)

    small, large, text = run(body())
    assert small[0] >= 32 and small[1] >= 32
    assert large[0] > 60 and large[1] >= large[0]
    assert " 60 " in next(line for line in text.splitlines() if line.lstrip().startswith("k"))


def test_a_learned_mapping_belongs_to_the_sound_it_was_learned_in(link):
    """Slot B never learned CC81, so flipping to B plays B with the default map, and back in A
    the learned mapping is there again."""

    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("down", "ctrl+l")
            link.send_midi(0xB0, 81, 10)
            await wait_for(pilot, lambda: app.message_text.startswith("learned"))
            in_a = [c for c in link.controls() if c.get("cc") == 81]
            await pilot.press("ctrl+t")
            in_b = await wait_for(pilot, lambda: not [c for c in link.controls() if c.get("cc") == 81])
            await pilot.press("ctrl+t")
            back = await wait_for(pilot, lambda: [c for c in link.controls() if c.get("cc") == 81] == in_a)
            return in_a, in_b, back, app.session.slots["A"].dirty

    in_a, none_in_b, back_in_a, a_dirty = run(body())
    assert in_a and in_a[0]["target"] == "pickup.0.position"
    assert none_in_b and back_in_a
    assert a_dirty  # a new mapping is a change to save
