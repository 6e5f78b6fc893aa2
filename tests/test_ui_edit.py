"""Editing from the UI: typed values are checked and a refused one changes nothing; steps;
A/B slots flip while a note rings; quitting asks only when something is unsaved."""

from __future__ import annotations

import pytest
from support.ui import fresh, run, screen_text, wait_for

from rtvoice.engine.settings import Settings
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.screens.dialogs import AskScreen, PromptScreen
from rtvoice.ui.widgets.status import MODIFIED_MARK

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)


async def type_value(pilot, app, name: str, text: str):
    """Select ``name`` in the parameter list, press enter and type ``text``; returns the prompt."""
    app.params.focus()
    await pilot.pause()
    while app.params.selected_name != name:
        await pilot.press("down")
    await pilot.press("enter")
    prompt = app.screen
    assert isinstance(prompt, PromptScreen)
    await pilot.press("home", "ctrl+k", *text, "enter")
    return prompt


@pytest.mark.parametrize(("name", "text", "reason"), [
    ("tuning.a4_hz", "2000", "out of range [400, 480]"),
    ("string.t60_low", "slow", "expected a number"),
    ("string.t60_high", "9", "must not exceed"),  # T60 at 2 kHz above T60 at 100 Hz: negative loss
    ("excitation.kind", "bowed", "expected one of 'pluck', 'strike'"),
    ("pickup.0.position", "700mm", "out of range"),  # beyond the 648 mm string
    ("voices", "2.5", "expected a whole number"),
    ("pickup.0.sensing", "magnetic", "expected one of"),
])
def test_an_invalid_typed_value_is_refused_with_the_reason_and_changes_nothing(link, name, text, reason):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            before_ui, before_engine = app.session.settings, link.settings
            prompt = await type_value(pilot, app, name, text)
            refused = prompt.error_text
            open_after = app.screen is prompt
            await pilot.press("escape")
            await pilot.pause()
            after_text = screen_text(app)
            return before_ui, before_engine, app.session.settings, link.settings, refused, open_after, \
                after_text

    before_ui, before_engine, after_ui, after_engine, refused, open_after, text = run(body())
    assert refused.startswith("refused:") and reason in refused and name in refused
    assert open_after  # the prompt stays for a correction
    assert after_ui.differences(before_ui) == [] and after_engine.differences(before_engine) == []
    assert MODIFIED_MARK not in text


def test_a_valid_typed_value_reaches_the_engine_and_marks_the_sound_changed(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "tab")  # on the default's neck: pluck -> hand -> pickup 1
            await type_value(pilot, app, "pickup.0.position", "120mm")
            await pilot.pause()
            return app.session.settings, link.settings, screen_text(app)

    ui, engine_side, text = run(body())
    assert ui.get("pickup.0.position") == pytest.approx(120 / 648)
    assert engine_side.get("pickup.0.position") == pytest.approx(120 / 648)
    assert MODIFIED_MARK in text
    assert "pickup 1 120.0 mm from the saddle" in text  # the neck's readout of its pickup, in millimetres


def test_steps_move_by_one_percent_of_the_range_and_stop_at_its_ends(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            app.params.focus()
            app.params.select_name("output.gain_db")
            await pilot.press("left", "left", "left")
            stepped = app.session.settings.get("output.gain_db")
            app.params.select_name("excitation.kind")
            await pilot.press("right")
            kind = app.session.settings.get("excitation.kind")
            app.params.select_name("tuning.a4_hz")
            await pilot.press(*["right"] * 60)
            top = app.session.settings.get("tuning.a4_hz")
            return stepped, kind, top, link.settings

    stepped, kind, top, engine_side = run(body())
    assert stepped == pytest.approx(-6.0 - 3 * 0.72)  # range -60..12 dB: 0.72 dB a step
    assert kind == "strike" and engine_side.get("excitation.kind") == "strike"
    assert top == 480.0  # held at the top of the range, never beyond


def test_ab_slots_flip_between_two_sounds_while_a_note_rings(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("ctrl+t")  # to B (starts as a copy of A)
            # B: pickup 1 (on the default's neck: pluck -> hand -> pickup 1) 20 mm further from the saddle
            await pilot.press("tab", "tab", "shift+right", "shift+right")
            b_position = app.session.settings.get("pickup.0.position")
            await pilot.press("z")  # pluck
            await wait_for(pilot, lambda: app._snap is not None and app._snap.note == 40)
            await pilot.press("ctrl+t")  # back to A while E2 rings
            ok_a = await wait_for(pilot, lambda: link.settings.get("pickup.0.position") == 0.15)
            a_text = screen_text(app)
            ringing = app._snap.voices
            await pilot.press("ctrl+t")
            ok_b = await wait_for(pilot, lambda: link.settings.get("pickup.0.position") == b_position)
            return b_position, ok_a, ok_b, a_text, ringing, screen_text(app), app.session

    b_position, ok_a, ok_b, a_text, ringing, b_text, session = run(body())
    assert b_position == pytest.approx(0.15 + 20 / 648)
    assert ok_a and ok_b  # the engine follows each flip
    assert ringing >= 1  # the note was not cut by the flip
    assert "slot A" in a_text and "slot B" in b_text
    assert session.slots["A"].settings.get("pickup.0.position") == 0.15


def test_quit_asks_nothing_when_nothing_is_unsaved(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("ctrl+q")
            await pilot.pause()
            return app.return_code, isinstance(app.screen, AskScreen) if app.is_running else False

    code, asked = run(body())
    assert code == 0 and not asked


def test_quit_with_unsaved_changes_asks_once_and_stays_on_no(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("right")  # pluck 1 mm further from the bridge
            await pilot.press("ctrl+q")
            first = app.screen
            question = str(first.question) if isinstance(first, AskScreen) else ""
            await pilot.press("ctrl+q")  # a second ctrl+q does not stack a second question
            stacked = len([s for s in app.screen_stack if isinstance(s, AskScreen)])
            await pilot.press("n")
            still_running = app.is_running and app.return_code is None
            await pilot.press("ctrl+q", "y")
            await pilot.pause()
            return question, stacked, still_running, app.return_code

    question, stacked, still_running, code = run(body())
    assert "unsaved" in question and "Slot A" in question
    assert stacked == 1
    assert still_running
    assert code == 0


def test_settings_defaults_are_what_the_tests_assume():
    """Guards the numbers above: the default pickup sits at 0.15 of a 648 mm string."""
    s = Settings.defaults()
    assert s.get("pickup.0.position") == 0.15 and s.get("string.scale_length_mm") == 648.0
