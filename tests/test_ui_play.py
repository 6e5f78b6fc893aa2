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

SCALE_MM = 648.0
#: Where a controller stops a pickup on the default neck: 1 mm short of its 22nd fret, which lies
#: 648 2^(-22/12) = 181.84 mm from the saddle (12-TET fret rule, common practice).
NECK_END_MM = SCALE_MM * 2 ** (-22 / 12) - 1.0


def test_keys_pluck_notes_octave_keys_shift_them_and_space_mutes_everything(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            seen = []
            await pilot.press("a")  # second row (the default six-string's string 5), open: A2
            seen.append(await wait_for(pilot, lambda: app._snap.note == 45))
            # 12 frets along the strings (an octave up; README): the bottom row's first key, the low E
            # string at fret 12, is E3 (standard tuning, 12-TET fret rule; common practice)
            await pilot.press("greater_than_sign")
            shifted = app.message_text
            await pilot.press("z")
            seen.append(await wait_for(pilot, lambda: app._snap.note == 52))
            rings_without_release = app._snap.voices >= 1  # no key release was ever sent
            line = screen_text(app).splitlines()[0]
            await pilot.press("space")
            silent = await wait_for(pilot, lambda: app._snap.voices == 0)
            return seen, rings_without_release, shifted, line, silent, app.message_text

    seen, rings, shifted, line, silent, message = run(body())
    assert seen == [True, True]
    assert rings
    # The rows now play frets 12-21 (said on the message line; the top line leaves the keys out first
    # when it is narrow, and names the note ringing).
    assert shifted == "keys: strings 6-3, frets 12-21"
    assert "ringing E3" in line
    assert silent and message == "all strings muted"


def test_learn_maps_the_next_controller_sent_through_the_engine_and_saves_it_with_the_preset(link, home):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "tab", "ctrl+l")  # pickup 1 on the neck (pluck -> hand -> pickup 1), learn
            learning_line = screen_text(app).splitlines()[0]
            link.send_midi(0xB2, 80, 64)  # CC80 on MIDI channel 3, as from a MIDI input
            learned = await wait_for(pilot, lambda: app.message_text.startswith("learned"))
            learned_message = app.message_text
            app.params.select_name("pickup.0.position")
            await pilot.pause()
            table_text = screen_text(app)
            link.send_midi(0xB2, 80, 127)  # the controller now drives the pickup, to the top of its range
            moved = await wait_for(pilot, lambda: app.session.settings.get("pickup.0.position") == pytest.approx(
                NECK_END_MM / SCALE_MM, abs=1e-12))
            await pilot.press("ctrl+s")
            assert isinstance(app.screen, PromptScreen)
            await pilot.press(*"with-cc80", "enter")
            await pilot.pause()
            await pilot.press("enter")  # the description, as it is
            await pilot.pause()
            return learning_line, learned, learned_message, table_text, moved, app.neck_view.picture

    learning_line, learned, message, table, moved, drawn = run(body())
    assert "LEARN pickup 1 position" in learning_line  # pickups counted from 1, as on the neck view
    assert learned and "CC80" in message and "pickup 1 position" in message
    row = next(line for line in table.splitlines() if "position" in line and "pickup 1" in line)
    assert "CC80 ch3" in row
    # The top of the learned range (0.995 of the scale) lies over the default neck: the controller
    # carries the pickup no further than 1 mm short of the last fret, and the neck is redrawn there too.
    assert moved and drawn.pickups[0].bass_mm == pytest.approx(NECK_END_MM, abs=1e-9)
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
            await pilot.press("tab", "tab", "ctrl+l")  # pickup 1 on the default's neck (pluck -> hand -> pickup 1)
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
