"""The instrument in the UI: the neck view on a fretted instrument, moves in mm and the hand in
frets, the keyboard rows on the strings, the bars and the A/B view at the loudest voice's fret
(the strings' table and the engine's staging of the strings: tests/test_ui_strings.py).

Reference facts (outside the project):
- 12-TET fret rule (common practice): the speaking length at fret n is L 2^(-n/12), so a point
  fixed d mm from the saddle lies at d / (L 2^(-n/12)) of the note; fret 22 of a 648 mm scale is
  648 * 2^(-22/12) = 181.84 mm from the saddle (shared/references.md, "The instrument").
- Mode shape sin(k pi x) of an ideal string (Fletcher & Rossing, *The Physics of Musical
  Instruments*, 2nd ed. 1998, ch. 2): a point pickup at x = 1/4 hears no 4th, 8th, ... harmonic,
  at x = 1/2 no even one. 162 mm on a 648 mm scale is 1/4 of the open string and 1/2 of the note at
  fret 12 (calc, shared/references.md).
- Plucked string a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)), a contact of width w times
  sinc(k pi w / 2) (Fletcher & Rossing 1998, ch. 2; references.md); pickup aperture sinc(k pi w / 2)
  (Paiva, Pakarinen & Välimäki, JAES 60(10), 768, 2012); velocity sensing (-sigma + i w) / w_1
  (Horton & Moore, Am. J. Phys. 77(2), 144, 2009); stiff string f_k = k f0 sqrt(1 + B k^2) and
  B ~ 1/L^2 at one tension, so B at fret 12 is 4 B open (Fletcher, JASA 36, 203, 1964); loss law
  sigma = b1 + b3 w^2 through two T60s (Chaigne & Askenfelt, JASA 95(2), 1112, 1994); coil and
  cable low-pass (second-order resonance, common practice; scipy.signal.freqs as the reference).
- One MIDI channel per string, channel n for string n (the convention of MIDI guitar controllers,
  common practice); a note-on on channel n has the status byte 0x90 + n - 1 (MIDI 1.0 Detailed
  Specification), so string 5 is channel index 4.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from support.describe import failing
from support.sounds import open_strings
from support.ui import fresh, run, screen_text, wait_for

from rtvoice.engine import OUTPUT_SCALE, Settings, apply_assignments
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.compare import compare_slots
from rtvoice.ui.fretting import Place
from rtvoice.ui.keyboard import KeyboardPlayer
from rtvoice.ui.prediction import FLOOR_DB, predicted_levels_at
from rtvoice.ui.session import SoundSession
from rtvoice.ui.widgets.bars import AXIS, COLUMNS_PER_HARMONIC, NULL_MARK
from rtvoice.ui.widgets.neck_view import NeckView

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)

SCALE_MM = 648.0
HAND = Settings.defaults().with_values({"instrument.assign": "hand"})
OPEN = open_strings()
CHANNEL = Settings.defaults().with_values({"instrument.assign": "channel"})


def typed(settings: Settings, *assignments: str) -> Settings:
    return apply_assignments(settings, list(assignments), source="test")


def app_with(link, settings: Settings) -> RtvoiceApp:
    return RtvoiceApp(fresh(link), SoundSession(settings), safety_note=False)


class RecordingLink:
    """The real engine link, with every note-on the app sends through it written down first (the
    link itself sends them on as bytes the engine reads; this is the app's side of that)."""

    def __init__(self, link):
        self._link = link
        self.note_ons: list[tuple[int, int]] = []  # (note, channel index 0-15)

    def note_on(self, note: int, velocity: int = 100, channel: int = 0) -> None:
        self.note_ons.append((note, channel))
        self._link.note_on(note, velocity, channel)

    def __getattr__(self, name):
        return getattr(self._link, name)


# -- the neck view in the main screen ----------------------------------------------------------------
def test_a_fretted_instrument_shows_its_neck_where_the_open_rule_shows_one_string(link):
    async def body():
        out = {}
        app = app_with(link, HAND)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            out["fretted"] = (app.neck_view.display, app.string_view.display, screen_text(app),
                              isinstance(app.focused, NeckView))
        app = app_with(link, OPEN)  # the default sound with every note an open string of its own
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            out["open"] = (app.neck_view.display, app.string_view.display, screen_text(app))
            app.params.focus()
            app.params.select_name("instrument.assign")
            await pilot.press("right")  # open -> hand
            await pilot.pause()
            out["switched"] = (app.session.settings.get("instrument.assign"), app.neck_view.display,
                               app.string_view.display, link.settings.get("instrument.assign"))
        return out

    out = run(body())
    neck_shown, string_shown, text, focused = out["fretted"]
    assert neck_shown and not string_shown and focused
    assert "saddle" in text and " 6 E2" in text and " 1 E4" in text and "hand 3" in text
    assert "f3 strings" in text.splitlines()[-1]
    neck_shown, string_shown, text = out["open"]
    assert string_shown and not neck_shown and "bridge" in text and "f3" not in text.splitlines()[-1]
    assert out["switched"] == ("hand", True, False, "hand")


def test_a_pickup_moved_on_the_neck_moves_by_the_millimetres_asked_and_keeps_its_slant(link):
    slanted = typed(HAND, "pickup.0.position=100mm", "pickup.0.slant=-8mm")

    async def body():
        app = app_with(link, slanted)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "tab")  # pluck -> hand -> pickup 1
            selected = app.neck_view.selected
            s0 = app.session.settings
            await pilot.press("right")  # 1 mm away from the saddle
            await pilot.pause()
            s1 = app.session.settings
            await pilot.press("shift+right")  # 10 mm more
            await pilot.pause()
            s2 = app.session.settings
            app.neck_view.post_message(NeckView.MoveRequested(app.neck_view, "pickup 1", -2.5))
            await pilot.pause()
            return selected, s0, s1, s2, app.session.settings, link.settings, screen_text(app)

    selected, s0, s1, s2, s3, engine_side, text = run(body())
    assert selected == "pickup 1"
    x = [s.get("pickup.0.position") for s in (s0, s1, s2, s3)]
    # A position is a fraction of the open scale: 1 mm on the 648 mm default is 1/648.
    assert x[1] - x[0] == pytest.approx(1 / SCALE_MM, abs=1e-12)
    assert x[2] - x[1] == pytest.approx(10 / SCALE_MM, abs=1e-12)
    assert x[3] - x[2] == pytest.approx(-2.5 / SCALE_MM, abs=1e-12)
    slant = -8 / SCALE_MM
    assert all(s.get("pickup.0.slant") == pytest.approx(slant, abs=1e-15) for s in (s1, s2, s3))
    # Both ends moved with the centre: treble end = centre + slant / 2, bass end = centre - slant / 2.
    treble_mm, bass_mm = (x[3] + slant / 2) * SCALE_MM, (x[3] - slant / 2) * SCALE_MM
    assert treble_mm == pytest.approx(100 + 8.5 - 4, abs=1e-9) and bass_mm == pytest.approx(100 + 8.5 + 4, abs=1e-9)
    assert engine_side.get("pickup.0.position") == x[3]  # the engine was told
    assert "bass 112.5 mm, treble 104.5 mm" in text  # the neck's caption, in mm from the saddle


def test_a_move_over_the_frets_is_refused_and_the_pickup_stays_where_it_was(link):
    """Fret 22 of a 648 mm scale lies 181.84 mm from the saddle (12-TET fret rule): a pickup there
    would sit under the strings' fretted part, which the instrument refuses."""
    start = typed(HAND, "pickup.0.position=150mm")

    async def body():
        app = app_with(link, start)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "tab", "shift+right", "shift+right", "shift+right", "shift+right")
            await pilot.pause()
            return app.session.settings, link.settings, app.message_text

    after, engine_side, message = run(body())
    # 160, 170, 180 mm were taken; 190 mm lies past fret 22 (648 * 2^(-22/12) = 181.84 mm).
    assert after.get("pickup.0.position") * SCALE_MM == pytest.approx(180.0, abs=1e-9)
    assert engine_side.get("pickup.0.position") == after.get("pickup.0.position")
    fret_22_mm = SCALE_MM * 2 ** (-22 / 12)
    assert abs(fret_22_mm - 181.84) < 0.005
    assert message.startswith("refused:") and "pickup.0.position" in message and "181.8 mm" in message


def test_the_hand_moves_a_fret_a_key_and_the_status_line_says_where_it_is(link):
    async def body():
        app = app_with(link, HAND)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("tab")  # pluck -> hand
            selected = app.neck_view.selected
            await pilot.press("left")  # towards the saddle: one fret up the neck
            await pilot.pause()
            one = app.session.settings.get("hand.fret")
            await pilot.press("shift+left")  # five more
            await pilot.pause()
            six = app.session.settings.get("hand.fret"), link.settings.get("hand.fret"), screen_text(app)
            app.neck_view.post_message(NeckView.HandRequested(app.neck_view, 14.0))  # to fret 23 of 22
            await pilot.pause()
            return selected, one, six, app.session.settings.get("hand.fret"), app.message_text

    selected, one, (nine, engine_nine, text), after, message = run(body())
    assert selected == "hand"
    assert one == 4.0 and nine == 9.0 and engine_nine == 9.0  # from the default fret 3
    assert "hand at fret 9" in text.splitlines()[0] and "hand 9" in text
    assert after == 9.0 and message.startswith("refused:") and "hand.fret" in message


def test_learn_on_the_neck_gives_the_hand_to_a_controller(link):
    async def body():
        app = app_with(link, HAND)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("tab", "ctrl+l")  # the hand, then learn
            learning = screen_text(app).splitlines()[0]
            link.send_midi(0xB0, 85, 10)  # CC85, as from a MIDI input
            learned = await wait_for(pilot, lambda: app.message_text.startswith("learned"))
            link.send_midi(0xB0, 85, 64)
            # A 7-bit controller over the hand's range 0..36 frets, linear: 64 / 127 of it.
            moved = await wait_for(pilot, lambda: abs(app.session.settings.get("hand.fret") - 36 * 64 / 127) < 1e-9)
            await pilot.pause()
            return learning, learned, moved, app.session.settings.get("hand.fret"), app.neck_view.picture

    learning, learned, moved, hand, picture = run(body())
    assert "LEARN hand.fret" in learning and learned
    assert moved, f"hand.fret = {hand}, want {36 * 64 / 127} (CC value 64 of 127 over 0..36)"
    assert picture.hand_fret == hand  # the neck shows where the controller put the hand


# -- the keyboard rows on the strings ----------------------------------------------------------------
def test_the_keyboard_row_of_string_5_sends_its_open_note_plus_the_fret_on_channel_index_4(link):
    async def body():
        recorder = RecordingLink(fresh(link))
        app = RtvoiceApp(recorder, SoundSession(HAND), safety_note=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("a", "s", "d")  # the second row from the bottom: string 5, frets 0, 1, 2
            await pilot.press("equals_sign", "a")  # the rows one string higher: that row is string 4
            await pilot.press("greater_than_sign", "a")  # 12 frets along: string 4, fret 12
            line = screen_text(app).splitlines()[0]
            await pilot.press("minus", "minus", "a")  # back (held at the lowest strings): string 5, fret 12
            await pilot.pause()
            return list(recorder.note_ons), line

    sent, line = run(body())
    a2, d3 = 45, 50  # open notes of strings 5 and 4 (E2 A2 D3 G3 B3 E4, common practice)
    assert sent == [(a2, 4), (a2 + 1, 4), (a2 + 2, 4), (d3, 3), (d3 + 12, 3), (a2 + 12, 4)]
    assert "keys: strings 5-2, frets 12-21" in line


def test_on_four_strings_the_rows_cover_them_all_and_the_keys_stay_on_the_neck():
    four = typed(CHANNEL, "instrument.frets=20").with_string_count(4)  # E4 B3 G3 D3, 20 frets
    player = KeyboardPlayer()
    assert player.row_strings(four) == [4, 3, 2, 1]  # bottom row first: the lowest string
    assert player.move_strings(four, 1) == [4, 3, 2, 1]  # no string beyond the first
    assert player.move_frets(four, 1) == 12 and player.move_frets(four, 1) == 12  # 24 is off a 20-fret neck
    key = player.string_key("9", four)  # top row, 9th key: string 1 at fret 12 + 8
    assert key is not None and (key.string, key.fret, key.note, key.channel) == (1, 20, 64 + 20, 0)
    assert player.string_key("0", four) is None and player.missing_fret("0", four) == 21


def test_under_the_channel_rule_a_key_sounds_on_its_own_string_at_its_fret(link):
    async def body():
        app = app_with(link, CHANNEL)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("d")  # string 5, fret 2
            placed = await wait_for(pilot, lambda: app.engine.places.loudest == Place(5, 2))
            drawn = app.neck_view.picture.sounding
            return placed, drawn, app._snap.note

    placed, drawn, note = run(body())
    assert placed and note == 47  # A2 + 2 frets = B2
    assert [(n.string, n.fret, n.loudest) for n in drawn] == [(5, 2, True)]


# -- the bars at the loudest voice's fret ------------------------------------------------------------
def sinc(u: np.ndarray) -> np.ndarray:
    return np.where(u == 0, 1.0, np.sin(u) / np.where(u == 0, 1.0, u))


def reference_at_fret_db(s: Settings, open_note: int, fret: int, b_open: float, n: int, velocity: int) -> np.ndarray:
    """Attack levels of a fretted note from the published formulas (module docstring): every point
    and width fixed on the body is a fraction 2^(fret/12) larger of the stopped note."""
    k = np.arange(1, n + 1, dtype=float)
    scale = 2.0 ** (fret / 12)  # 12-TET fret rule
    f0 = 440.0 * 2 ** ((open_note + fret - 69) / 12)  # MIDI 1.0 / ISO 16 equal temperament
    p, cw = s.get("excitation.position") * scale, s.get("excitation.width") * scale
    a = 2 * np.sin(k * np.pi * p) / (k**2 * np.pi**2 * p * (1 - p)) * sinc(k * np.pi * cw / 2)
    f = k * f0 * np.sqrt(1 + b_open * scale**2 * k**2)  # B ~ 1/L^2 at one tension
    w = 2 * np.pi * f
    s_lo, s_hi = 3 * np.log(10) / s.get("string.t60_low"), 3 * np.log(10) / s.get("string.t60_high")
    w_lo, w_hi = 2 * np.pi * 100, 2 * np.pi * 2000
    b3 = (s_hi - s_lo) / (w_hi**2 - w_lo**2)
    sigma = s_lo - b3 * w_lo**2 + b3 * w**2
    pickup = np.zeros(n, complex)
    for pu in s.pickups:
        shape = np.sin(k * np.pi * pu["position"] * scale) * sinc(k * np.pi * pu["width"] * scale / 2)
        sense = (-sigma + 1j * w) / w[0] if pu["sensing"] == "velocity" else 1.0
        pickup += pu["polarity"] * 10 ** (pu["level_db"] / 20) * shape * sense
    w_r = 2 * np.pi * s.get("electronics.resonance_hz")
    _, h = scipy.signal.freqs([1.0], [1 / w_r**2, 1 / (s.get("electronics.q") * w_r), 1.0], worN=w)
    amp = (velocity / 127) ** 2 * OUTPUT_SCALE * 10 ** (s.get("output.gain_db") / 20) * np.abs(a * pickup * h)
    amp[f >= 0.45 * 48000] = 0.0
    with np.errstate(divide="ignore"):
        return np.where(amp > 0, 20 * np.log10(np.maximum(amp, 1e-300)), FLOOR_DB)


POINT_AT_162 = typed(CHANNEL, "pickup.0.position=162mm", "pickup.0.width=0", "strings.5.inharmonicity=1e-4")


def test_a_pickup_162_mm_from_the_saddle_loses_every_4th_harmonic_open_and_every_2nd_at_fret_12():
    open_db = predicted_levels_at(POINT_AT_162, 5, 0, 32)
    fret12_db = predicted_levels_at(POINT_AT_162, 5, 12, 32)
    k = np.arange(1, 33)
    # The default pluck at 0.2 of the scale: 1/5 of the open string, 2/5 of the note at fret 12, whose
    # sine-series nulls fall on k = 5, 10, ... in both (Fletcher & Rossing 1998).
    plucked = k % 5 != 0
    assert np.all(open_db[k % 4 == 0] < -150), failing(open_db[k % 4 == 0] < -150, open_db[k % 4 == 0], k[k % 4 == 0])
    assert np.all(open_db[(k % 4 != 0) & plucked] > -100)
    assert np.all(fret12_db[k % 2 == 0] < -150), failing(fret12_db[k % 2 == 0] < -150, fret12_db[k % 2 == 0],
                                                          k[k % 2 == 0])
    assert np.all(fret12_db[(k % 2 == 1) & plucked] > -100)
    for fret in (0, 5, 12):
        ours = predicted_levels_at(POINT_AT_162, 5, fret, 32, 90)
        ref = reference_at_fret_db(POINT_AT_162, 45, fret, 1e-4, 32, 90)
        heard = ref > -150
        np.testing.assert_allclose(ours[heard], ref[heard], atol=1e-6, err_msg=f"fret {fret}")
        assert np.all(ours[~heard] < -150)


def test_the_bars_follow_the_loudest_voice_to_its_string_and_fret(link):
    async def body():
        app = app_with(link, POINT_AT_162)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("greater_than_sign", "a")  # string 5, fret 12: A3 on channel index 4
            placed = await wait_for(pilot, lambda: app.engine.places.loudest == Place(5, 12)
                                    and app._predicted_key is not None and app._predicted_key[2] == Place(5, 12))
            await pilot.pause()
            return placed, app.bars.predicted_db.copy(), app._snap.velocity, screen_text(app)

    placed, predicted, velocity, text = run(body())
    assert placed, "the engine never reported the note at string 5, fret 12"
    assert velocity == 90  # the keyboard's
    n = predicted.size
    assert n >= 32
    ref = reference_at_fret_db(POINT_AT_162, 45, 12, 1e-4, n, velocity)
    heard = ref > -150
    np.testing.assert_allclose(predicted[heard], ref[heard], atol=1e-6)
    k = np.arange(1, n + 1)
    assert np.all(predicted[k % 2 == 0] < -150), failing(predicted[k % 2 == 0] < -150, predicted[k % 2 == 0],
                                                          k[k % 2 == 0], "harmonics")
    assert "harmonics of A3 on string 5, fret 12" in text
    lines = text.splitlines()
    axis_row = next(i for i, line in enumerate(lines) if line[:AXIS].strip() == "k")
    lowest = lines[axis_row - 1]
    for harmonic in (2, 4, 6, 8):  # the null mark under every even harmonic
        assert lowest[AXIS + 1 + COLUMNS_PER_HARMONIC * (harmonic - 1) + 1] == NULL_MARK, (harmonic, lowest)
    for harmonic in (1, 3, 7):
        assert lowest[AXIS + 1 + COLUMNS_PER_HARMONIC * (harmonic - 1) + 1] != NULL_MARK, (harmonic, lowest)


def test_the_a_b_comparison_of_two_pickups_moves_with_the_fret():
    """Point pickups at 162 mm (1/4 of the open string) and 108 mm (1/6): open, A lacks every 4th
    harmonic and B every 6th; at fret 12 (1/2 and 1/3 of the note) A lacks every 2nd and B every 3rd
    (mode shapes, Fletcher & Rossing 1998). Plucked at 0.01 of the scale, the pluck's coefficients
    fall about as 1/k (Fletcher & Rossing 1998) and velocity sensing weights them by k (Horton &
    Moore 2009), so the first 24 harmonics stay within the comparison's 40 dB but for these nulls."""
    base = typed(CHANNEL, "pickup.0.width=0", "excitation.position=0.01", "excitation.width=0")
    a, b = typed(base, "pickup.0.position=162mm"), typed(base, "pickup.0.position=108mm")
    k = range(1, 25)
    open_ab = compare_slots(a, b, 45, 24, place=Place(5, 0))
    assert open_ab.only_a == tuple(h for h in k if h % 6 == 0 and h % 4) and \
        open_ab.only_b == tuple(h for h in k if h % 4 == 0 and h % 6)
    fret12 = compare_slots(a, b, 57, 24, place=Place(5, 12))
    assert fret12.only_a == tuple(h for h in k if h % 3 == 0 and h % 2) and \
        fret12.only_b == tuple(h for h in k if h % 2 == 0 and h % 3)
