"""The instrument's strings in the UI (the table F3 opens, a field typed there) and where each
string sounds as the engine's callback stages it for the UI's neck view.

Reference facts (outside the project):
- Mersenne-Taylor T = mu (2 L f0)^2 with mu = rho pi d^2 / 4, and B = pi^3 E d^4 / (64 T L^2)
  (Fletcher, JASA 36, 203, 1964): d = 0.254 mm, L = 648 mm, f0 = 329.63 Hz, rho = 7850 kg/m^3,
  E = 200 GPa give T = 72.6 N, B = 1.32e-5 (shared/references.md, calc; the steel values are
  handbook values, from memory there).
- A light electric set: .010 .013 .017 plain, .026 .036 .046 wound, E4 B3 G3 D3 A2 E2 from string 1
  (common practice).
- One MIDI channel per string, channel n for string n (the convention of MIDI guitar controllers,
  common practice); a note-on on channel n has the status byte 0x90 + n - 1 (MIDI 1.0 Detailed
  Specification).
"""

from __future__ import annotations

import math

import pytest
from support.ui import fresh, run
from textual.widgets import Input

from rtvoice.engine import Engine, Settings
from rtvoice.host.board import STRING_FRET_FIELDS, STRING_LEVEL_FIELDS, Board
from rtvoice.host.meters import Publisher, VoiceStage
from rtvoice.host.ring import SampleRing
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.screens.dialogs import PromptScreen
from rtvoice.ui.screens.strings import StringsScreen
from rtvoice.ui.session import SoundSession

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)

SCALE_MM = 648.0
HAND = Settings.defaults().with_values({"instrument.assign": "hand"})
CHANNEL = Settings.defaults().with_values({"instrument.assign": "channel"})


# -- the strings' table --------------------------------------------------------------------------------
def plain_steel(d_mm: float, f0_hz: float, scale_mm: float = SCALE_MM) -> tuple[float, float]:
    """(T in N, B) of a plain steel string: Mersenne-Taylor and Fletcher 1964, rho = 7850 kg/m^3,
    E = 200 GPa (handbook values, references.md)."""
    d, length = d_mm / 1000, scale_mm / 1000
    mu = 7850 * math.pi * d**2 / 4
    tension = mu * (2 * length * f0_hz) ** 2
    return tension, math.pi**3 * 200e9 * d**4 / (64 * tension * length**2)


def test_the_strings_table_shows_gauge_tension_and_b_and_a_typed_gauge_changes_them(link):
    async def body():
        app = RtvoiceApp(fresh(link), SoundSession(HAND), safety_note=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("f3")
            screen = app.screen
            assert isinstance(screen, StringsScreen)
            before = screen.table.rows_text()
            screen.table.move_cursor(row=0, column=2)  # string 1's gauge in mm
            await pilot.press("enter")
            prompt = app.screen
            title = prompt.title_text if isinstance(prompt, PromptScreen) else ""
            prompt.query_one(Input).value = ""
            await pilot.press(*"0.011in", "enter")
            await pilot.pause()
            return before, title, screen.table.rows_text(), app.session.settings, link.settings

    before, title, after, settings, engine_side = run(body())
    e4 = 440 * 2 ** ((64 - 69) / 12)  # 329.63 Hz
    tension, b = plain_steel(0.254, e4)
    assert tension == pytest.approx(72.6, abs=0.05) and b == pytest.approx(1.323e-5, rel=2e-3)  # references.md
    assert before[0].split() == ["1", "E4", "0.254", ".010", "plain", "-", "music_wire", f"{tension:.1f}", f"{b:.2e}"]
    assert before[5].split()[:5] == ["6", "E2", "1.168", ".046", "wound"]  # a light set (common practice)
    assert title == "new value for strings.1.diameter_mm"
    assert settings.get("strings.1.diameter_mm") == pytest.approx(0.2794, abs=1e-12)  # .011 in
    assert engine_side.get("strings.1.diameter_mm") == settings.get("strings.1.diameter_mm")
    tension11, b11 = plain_steel(0.2794, e4)
    assert after[0].split()[1:4] == ["E4", "0.279", ".011"]
    assert after[0].split()[-2:] == [f"{tension11:.1f}", f"{b11:.2e}"]


# -- the engine's side: where each string sounds, staged in the callback ---------------------------------
def test_the_callback_stages_each_strings_fret_and_level_and_the_board_carries_them():
    engine = Engine(CHANNEL)
    # Channel index 4 (string 5) note 57: fret 12; channel index 0 (string 1) note 66: fret 2.
    engine.render([(0, 0x94, 57, 100), (0, 0x90, 66, 60)])
    engine.render()
    stage = VoiceStage()
    arrays = [id(h[name]) for h in stage._halves for name in ("string_frets", "string_levels")]
    stage.stage(engine, 1.0)
    assert [id(h[name]) for h in stage._halves for name in ("string_frets", "string_levels")] == arrays
    board = Board.create()
    try:
        Publisher(board, SampleRing(4096), 48000).publish({}, stage.current(), 96)
        fields = board.read()[0]
    finally:
        board.close()
    frets = [int(fields[name]) for name in STRING_FRET_FIELDS]
    levels = [fields[name] for name in STRING_LEVEL_FIELDS]
    assert frets == [2, -1, -1, -1, 12, -1, -1, -1, -1, -1, -1, -1]
    assert all(-120 < levels[i] < 0 for i in (0, 4)) and all(levels[i] == -120 for i in (1, 2, 3, 5))
    assert (int(fields["string"]), int(fields["fret"])) in ((1, 2), (5, 12))
