"""The harmonic bars: what the model predicts at the attack, and how a pickup move changes it.

Reference formulas (outside the project):
- An ideal string's mode k has the shape sin(k pi x / L) (Fletcher & Rossing, *The Physics
  of Musical Instruments*, 2nd ed. 1998, ch. 2), so a point pickup at x weights it by
  sin(k pi x / L).
- A pickup of aperture width w averages that shape over w, which multiplies the weight by
  sinc(k pi w / 2L) = sin(k pi w / 2L) / (k pi w / 2L) (Paiva, Pakarinen & Välimäki,
  "Acoustics and Modeling of Pickups", JAES 60(10), 768, 2012).
Moving one pickup changes nothing else in the prediction, so every harmonic's predicted
level must move by exactly 20 log10 of the ratio of those weights.

The checks of those formulas in fractions of L play open strings (``instrument.assign = "open"``:
the string view, every note an open string of its own, a pickup anywhere along it); the default
six-string shows its neck instead and sees each place at distance / speaking length
(tests/test_ui_instrument.py checks its bars at the sounding fret).
"""

from __future__ import annotations

import numpy as np
import pytest
from support.describe import failing
from support.sounds import open_strings
from support.ui import fresh, run, screen_text, wait_for

from rtvoice.physics.pickup import aperture_weights
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.prediction import FLOOR_DB
from rtvoice.ui.session import SoundSession
from rtvoice.ui.widgets.bars import AXIS, COLUMNS_PER_HARMONIC, NULL_MARK

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)


def open_strings_app(link) -> RtvoiceApp:
    """The app on the default sound with every note an open string of its own (the string view)."""
    return RtvoiceApp(fresh(link), SoundSession(open_strings()), safety_note=False)


async def settled(pilot, app) -> None:
    """Wait until nothing rings: a voice still fading from the shared link's earlier sound (a fretted
    note, whose stiffness is its string's) would otherwise set the pitch the bars predict for, and
    its retiring mid-test would change every bar, not only by the pickup's weight."""
    await pilot.pause()
    assert await wait_for(pilot, lambda: app._snap is not None and app._snap.voices == 0)
    await pilot.pause()


def published_pickup_weight(k: np.ndarray, x: float, w: float) -> np.ndarray:
    """sin(k pi x) (Fletcher & Rossing 1998) times sinc(k pi w / 2) (Paiva et al. 2012), x, w in L."""
    u = k * np.pi * w / 2
    return np.sin(k * np.pi * x) * (np.sin(u) / u if w > 0 else 1.0)


def level_change_db(k: np.ndarray, x0: float, w0: float, x1: float, w1: float) -> np.ndarray:
    return 20 * np.log10(np.abs(published_pickup_weight(k, x1, w1) / published_pickup_weight(k, x0, w0)))


def test_moving_the_pickup_with_keys_moves_each_predicted_bar_as_the_pickup_formula_says(link):
    async def body():
        app = open_strings_app(link)
        async with app.run_test(size=(80, 24)) as pilot:
            await settled(pilot, app)
            await pilot.press("down")  # on the string: select pickup 1
            assert app.string_view.element.position_name == "pickup.0.position"
            before, s0 = app.bars.predicted_db.copy(), app.session.settings
            await pilot.press("shift+right", "shift+right", "shift+right")  # 3 x 10 mm towards the nut
            await pilot.pause()
            after, s1 = app.bars.predicted_db.copy(), app.session.settings
            engine_side = link.settings
        return before, after, s0, s1, engine_side

    before, after, s0, s1, engine_side = run(body())
    scale = s0.get("string.scale_length_mm")
    x0, x1 = s0.get("pickup.0.position"), s1.get("pickup.0.position")
    w = s0.get("pickup.0.width")
    assert (x1 - x0) * scale == pytest.approx(30.0, abs=1e-3)
    assert engine_side.get("pickup.0.position") == pytest.approx(x1)  # the engine was told
    n = min(before.size, after.size)
    assert n >= 32
    k = np.arange(1, n + 1, dtype=float)
    expected = level_change_db(k, x0, w, x1, w)
    audible = (before[:n] > FLOOR_DB) & (after[:n] > FLOOR_DB)
    assert audible.sum() >= 28
    np.testing.assert_allclose((after[:n] - before[:n])[audible], expected[audible], atol=1e-6)
    # The project's physics function is the published formula.
    np.testing.assert_allclose(aperture_weights(k, x1, w), published_pickup_weight(k, x1, w), atol=1e-12)


def test_a_pickup_at_a_quarter_of_the_string_shows_every_fourth_harmonic_as_silent(link):
    """sin(k pi / 4) = 0 for k = 4, 8, 12, ...: a pickup at L/4 cannot hear those modes
    (Fletcher & Rossing 1998, mode shapes); the bars mark them with the null mark."""

    async def body():
        app = open_strings_app(link)
        async with app.run_test(size=(80, 24)) as pilot:
            await settled(pilot, app)
            await pilot.press("down", "tab")  # select pickup 1, then into the parameter list
            assert app.params.selected_name == "pickup.0.position"
            await pilot.press("enter")
            await pilot.press("home", "ctrl+k", *"162mm", "enter")  # 648 mm / 4
            await pilot.pause()
            ok = await wait_for(pilot, lambda: app.bars.predicted_db.size >= 32
                                and app.session.settings.get("pickup.0.position") == 0.25)
            return ok, app.bars.predicted_db.copy(), screen_text(app)

    ok, predicted, text = run(body())
    assert ok
    k = np.arange(1, predicted.size + 1)
    silent = predicted <= FLOOR_DB
    # The default pluck at L/5 adds its own nulls at k = 5, 10, ... (same mode-shape argument).
    assert np.all(silent[k % 4 == 0]), \
        f"every 4th harmonic silent (<= {FLOOR_DB} dB): " + failing(silent[k % 4 == 0], predicted[k % 4 == 0],
                                                                  k[k % 4 == 0], "harmonics")
    kept = (k % 4 != 0) & (k % 5 != 0)
    assert not np.any(silent[kept]), \
        f"the others sound (> {FLOOR_DB} dB): " + failing(~silent[kept], predicted[kept], k[kept], "harmonics")
    lines = text.splitlines()
    axis_row = next(i for i, line in enumerate(lines) if line[:AXIS].strip() == "k")
    lowest = lines[axis_row - 1]
    for harmonic in (4, 8, 12):
        column = AXIS + 1 + COLUMNS_PER_HARMONIC * (harmonic - 1) + 1
        assert lowest[column] == NULL_MARK, (harmonic, lowest)
    for harmonic in (1, 2, 3, 6):
        column = AXIS + 1 + COLUMNS_PER_HARMONIC * (harmonic - 1) + 1
        assert lowest[column] != NULL_MARK


def test_widening_the_aperture_changes_the_bars_by_the_aperture_sinc(link):
    async def body():
        app = open_strings_app(link)
        async with app.run_test(size=(120, 40)) as pilot:
            await settled(pilot, app)
            await pilot.press("down")
            before, s0 = app.bars.predicted_db.copy(), app.session.settings
            await pilot.press(*["right_square_bracket"] * 12)  # 12 x 1 mm wider
            await pilot.pause()
            return before, app.bars.predicted_db.copy(), s0, app.session.settings

    before, after, s0, s1 = run(body())
    x = s0.get("pickup.0.position")
    w0, w1 = s0.get("pickup.0.width"), s1.get("pickup.0.width")
    assert (w1 - w0) * s0.get("string.scale_length_mm") == pytest.approx(12.0, abs=1e-3)
    n = min(before.size, after.size)
    assert n >= 50  # 120 columns fit more harmonics than 80
    k = np.arange(1, n + 1, dtype=float)
    audible = (before[:n] > FLOOR_DB) & (after[:n] > FLOOR_DB)
    expected = level_change_db(k, x, w0, x, w1)
    np.testing.assert_allclose((after[:n] - before[:n])[audible], expected[audible], atol=1e-6)
    # Wider aperture, darker sound: the 20th harmonic loses more than the 2nd.
    assert expected[19] < expected[1] < 0


def loss_law_sigma_per_s(freq_hz: np.ndarray, t60_low_s: float, t60_high_s: float) -> np.ndarray:
    """sigma = b1 + b3 w^2 (Chaigne & Askenfelt, JASA 95(2), 1112, 1994) through the two
    T60s at 100 Hz and 2000 Hz, with T60 = 3 ln 10 / sigma."""
    s_lo, s_hi = 3 * np.log(10) / t60_low_s, 3 * np.log(10) / t60_high_s
    w_lo, w_hi = 2 * np.pi * 100.0, 2 * np.pi * 2000.0
    b3 = (s_hi - s_lo) / (w_hi**2 - w_lo**2)
    return s_lo - b3 * w_lo**2 + b3 * (2 * np.pi * np.asarray(freq_hz)) ** 2


def test_live_bars_of_a_ringing_note_are_the_predicted_attack_less_each_harmonics_decay(link):
    """Pluck E2 from the computer keyboard. The engine's live levels (through shared memory)
    must equal the predicted attack levels less sigma_k t (in dB: 20 log10(e) sigma_k t), one
    elapsed time t for every harmonic."""

    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("z")  # the open bottom string: E2
            ok = await wait_for(pilot, lambda: app._snap is not None and app._snap.note == 40
                                and app.bars.live_db.size >= 8)
            snap = app._snap
            return ok, app.bars.live_db.copy(), app.bars.predicted_db.copy(), snap, app.session.settings

    ok, live, predicted, snap, settings = run(body())
    assert ok, "the engine never reported the note"
    k = np.arange(1, 13)
    keep = k % 5 != 0  # the pluck at L/5 leaves out harmonics 5 and 10
    sigma = loss_law_sigma_per_s(snap.mode_freqs_hz[:12], settings.get("string.t60_low"),
                                 settings.get("string.t60_high"))
    shortfall_db = (predicted[:12] - live[:12])[keep]
    per_second_db = 20 * np.log10(np.e) * sigma[keep]
    elapsed_s = float(np.dot(shortfall_db, per_second_db) / np.dot(per_second_db, per_second_db))
    assert 0.0 <= elapsed_s < 5.0
    np.testing.assert_allclose(shortfall_db, per_second_db * elapsed_s, atol=0.1)


def test_dragging_the_pickup_with_the_mouse_moves_it_and_the_bars_follow(link):
    async def body():
        app = open_strings_app(link)
        async with app.run_test(size=(80, 24)) as pilot:
            await settled(pilot, app)
            view = app.string_view
            start = view.column_of(0.15)  # where pickup 1 is drawn
            target = view.column_of(0.40)
            before, s0 = app.bars.predicted_db.copy(), app.session.settings
            await pilot.mouse_down(view, offset=(start, 2))
            picked = view.element.position_name
            await pilot.hover(view, offset=(target, 2))
            await pilot.mouse_up(view, offset=(target, 2))
            await pilot.pause()
            return picked, view.fraction_at(target), before, app.bars.predicted_db.copy(), s0, \
                app.session.settings, link.settings

    picked, expected_x, before, after, s0, s1, engine_side = run(body())
    assert picked == "pickup.0.position"  # the press picked the pickup, not the pluck
    x1 = s1.get("pickup.0.position")
    assert x1 == pytest.approx(expected_x, abs=1e-4) and engine_side.get("pickup.0.position") == x1
    w = s0.get("pickup.0.width")
    n = min(before.size, after.size)
    k = np.arange(1, n + 1, dtype=float)
    audible = (before[:n] > FLOOR_DB) & (after[:n] > FLOOR_DB)
    expected = level_change_db(k, s0.get("pickup.0.position"), w, x1, w)
    np.testing.assert_allclose((after[:n] - before[:n])[audible], expected[audible], atol=1e-6)
