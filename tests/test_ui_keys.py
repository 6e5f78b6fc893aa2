"""Keys in the UI: every press counts, one meaning per key in each context, and the footer shows
the keys of the screen in front."""

from __future__ import annotations

import pytest
from support.ui import fresh, run, screen_text
from textual.widgets import Input

from rtvoice.engine import presets
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.screens.dialogs import PromptScreen
from rtvoice.ui.screens.notes import help_text
from rtvoice.ui.screens.presets import PresetScreen
from rtvoice.ui.words import display_name, said_value

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)


def test_every_arrow_press_moves_the_pickup_one_millimetre_even_in_a_burst(link):
    # Presses come faster than the screen redraws: 20 in one burst, then 5 more.
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "tab")  # on the default's neck: pluck -> hand -> pickup 1
            assert app.neck_view.selected == "pickup 1"
            start = app.session.settings.get("pickup.0.position")
            await pilot.press(*["left"] * 20)  # towards the saddle
            await pilot.pause()
            after20 = app.session.settings.get("pickup.0.position")
            await pilot.press(*["right"] * 5)
            await pilot.pause()
            after5 = app.session.settings.get("pickup.0.position")
            return start, after20, after5, app.session.settings.get("string.scale_length_mm")

    start, after20, after5, scale_mm = run(body())
    assert (start - after20) * scale_mm == pytest.approx(20.0, abs=1e-9)
    assert (after5 - after20) * scale_mm == pytest.approx(5.0, abs=1e-9)


def test_refusing_to_delete_a_factory_preset_keeps_the_dialog_open_and_typing(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause()
            await pilot.press("ctrl+o")
            await pilot.press(*"glass")
            await pilot.pause()
            await pilot.press("ctrl+d")  # glass-bridge is a factory preset
            await pilot.pause()
            screen = app.screen
            still_open = isinstance(screen, PresetScreen)
            note = screen.note_text if still_open else ""
            await pilot.press(*"zz")  # must type into the filter, not play notes
            await pilot.pause()
            typed = screen.query_one(Input).value if still_open else ""
            played = link.snapshot().note
            return still_open, note, typed, played

    still_open, note, typed, played = run(body())
    assert still_open and note.startswith("refused:") and "factory preset" in note
    assert typed == "glasszz" and played < 0


def test_save_as_asks_for_a_description_and_saves_it(link, home):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause()
            await pilot.press("ctrl+o", "ctrl+n")
            await pilot.pause()
            name_prompt = app.screen
            await pilot.press(*"bridge-40", "enter")
            await pilot.pause()
            described = app.screen
            title = described.title_text if isinstance(described, PromptScreen) else ""
            described.query_one(Input).value = ""
            await pilot.press(*"Pickup 40 mm from the saddle", "enter")
            await pilot.pause()
            return name_prompt, title, app.session.slot

    name_prompt, title, slot = run(body())
    assert isinstance(name_prompt, PromptScreen) and title == "description of bridge-40"
    saved = presets.load_preset("bridge-40")
    assert saved.description == "Pickup 40 mm from the saddle" and slot.preset == "bridge-40"


def test_main_screen_keys_wait_behind_a_dialog_and_its_footer_shows_only_its_keys(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(120, 30)) as pilot:
            await pilot.pause()
            await pilot.press("f1")
            await pilot.pause()
            await pilot.press("f2")  # the map is a main-screen key: not over the help
            await pilot.pause()
            over_help = type(app.screen).__name__
            await pilot.press("escape")
            await pilot.press("ctrl+o")
            await pilot.pause()
            footer = screen_text(app).splitlines()[-1]
            return over_help, footer

    over_help, footer = run(body())
    assert over_help == "HelpScreen"
    assert "map" not in footer and "save as" in footer and "rename" in footer


def test_the_help_explains_every_indicator_on_the_meter_lines():
    text = help_text()
    for word in ("load", "xruns", "voices", "peak", "limit", "MIDI ◆/◇", "kHz, ms", "audio out"):
        assert word in text, word


def test_pickups_are_numbered_from_one_wherever_a_person_reads_them():
    assert display_name("pickup.0.level_db") == "pickup 1 level_db"
    assert display_name("pickup.3.position") == "pickup 4 position"
    assert display_name("string.t60_low") == "string.t60_low"
    # 40 mm on the default 648 mm string: rounded to what matters, millimetres first.
    assert said_value("pickup.0.position", 40 / 648, 648.0) == "pickup 1 position = 40.0 mm (0.06173)"


def test_added_pickups_go_to_distinct_places_not_stacked_on_one_spot():
    from support.sounds import open_strings

    from rtvoice.engine.settings import Settings

    # Open strings: a pickup may sit anywhere along each note's own length.
    for start in (0.15, 0.062, 0.33):
        s = open_strings().with_values({"pickup.0.position": start}).with_pickup_count(4)
        places = sorted(p["position"] for p in s.pickups)
        assert min(b - a for a, b in zip(places, places[1:], strict=False)) >= 0.03 - 1e-12, places
        assert s.pickups[0]["position"] == start  # the existing pickup stays where it was
    # The default six-string: added pickups go short of its last fret too, the 22nd, 648 2^(-22/12) =
    # 181.8 mm from the saddle (12-TET fret rule, common practice), so the settings stay ones that a
    # later edit, the engine and a saved preset accept.
    last_fret = 2 ** (-22 / 12)
    for start in (0.15, 0.062, 0.27):
        s = Settings.defaults().with_values({"pickup.0.position": start}).with_pickup_count(4)
        places = sorted(p["position"] for p in s.pickups)
        assert min(b - a for a, b in zip(places, places[1:], strict=False)) >= 0.03 - 1e-12, places
        assert s.pickups[0]["position"] == start
        assert places[-1] < last_fret, places
        assert s.with_values({"voices": 8}).get("voices") == 8  # a later edit is not refused


def test_a_climbing_xrun_count_is_explained_by_whose_callback_was_late(link):
    # Xruns cannot be caused on demand here, so the engine's snapshot is given counts: the real
    # Snapshot type, with only the two counters changed.
    from dataclasses import replace

    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause()
            base = link.snapshot()
            app._xrun_seen = (base.xruns, base.late, -1.0)  # what the engine counted so far: explained
            app.frames += 3 * 30  # past the start-up seconds, whose xruns are only counted
            app._explain_xruns(replace(base, xruns=base.xruns + 3, late=base.late + 3))
            own = app.message_text
            app.frames += 10 * 30  # ten seconds of UI time later
            app._explain_xruns(replace(base, xruns=base.xruns + 5, late=base.late + 3))
            machine = app.message_text
            return own, machine

    own, machine = run(body())
    assert "3 more xruns" in own and "overran its period 3 times" in own
    assert "2 more xruns" in machine and "machine or the audio server" in machine


def test_xruns_while_the_stream_starts_are_counted_not_explained(link):
    from dataclasses import replace

    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause()
            base = link.snapshot()
            app.frames = 1  # the UI's first moments
            app._explain_xruns(replace(base, xruns=base.xruns + 1))
            return app.message_text

    assert "xrun" not in run(body())
