"""A/B you can see: both slots' harmonics for one note side by side, what differs between them,
and both placements on the string."""

from __future__ import annotations

import numpy as np
import pytest
from support.sounds import open_strings
from support.ui import fresh, run, screen_text

from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.compare import compare_slots
from rtvoice.ui.prediction import predicted_levels_db
from rtvoice.ui.session import Slot
from rtvoice.ui.widgets.string_view import OTHER_PICKUP_MARK

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)

# Point pickups (no aperture): the pickup at 1/n of the string leaves out every n-th harmonic, since
# its weight sin(k pi x) is zero there (Paiva, Pakarinen & Valimaki, "Acoustics and Modeling of
# Pickups", JAES 60(10), 2012). Plucked at 1/50, the pluck's coefficients fall as about 1/k
# (Fletcher & Rossing, The Physics of Musical Instruments, 1998, ch. 2) and velocity sensing
# weights them by k (Horton & Moore, Am. J. Phys. 77(2), 2009), so the first 24 harmonics stay
# within 40 dB of each other but for the pickups' own nulls.
# Open strings (every note an open string of its own, drawn on the string view): the nulls sit at
# fractions of the note's own length, string.inharmonicity is its B (0: harmonic), and a pickup at 1/3
# lies past a fretted neck's last fret (the A/B view on the neck: tests/test_ui_instrument.py).
BASE = {"pickup.0.width": 0.0, "pickup.0.sensing": "velocity", "excitation.position": 0.02,
        "excitation.width": 0.0, "string.inharmonicity": 0.0}
QUARTER = open_strings().with_values({**BASE, "pickup.0.position": 0.25})
THIRD = open_strings().with_values({**BASE, "pickup.0.position": 1 / 3})


def test_the_comparison_names_the_harmonics_each_placement_lacks():
    c = compare_slots(QUARTER, THIRD, 40, 24)
    assert c.only_a == (3, 6, 9, 15, 18, 21)  # B at 1/3 loses every 3rd; 12 and 24 both lose
    assert c.only_b == (4, 8, 16, 20)  # A at 1/4 loses every 4th
    assert not c.same()


def test_level_and_centroid_differences_are_the_energy_sums_of_the_predicted_harmonics():
    # Spectral centroid sum f_k E_k / sum E_k (Peeters, "A large set of audio features", 2004), computed
    # here with numpy from the same predicted levels.
    c = compare_slots(QUARTER, THIRD, 45, 32)
    for s, level, centroid in ((QUARTER, c.level_a_db, c.centroid_a_hz), (THIRD, c.level_b_db, c.centroid_b_hz)):
        e = 10 ** (predicted_levels_db(s, 45, 32) / 10)
        f = 110.0 * np.arange(1, 33)  # A2 = 110 Hz (12-TET, common practice), B = 0: harmonic
        assert level == pytest.approx(10 * np.log10(e.sum()), abs=1e-9)
        assert centroid == pytest.approx(float((f * e).sum() / e.sum()), rel=1e-9)
    assert c.level_change_db == pytest.approx(c.level_b_db - c.level_a_db)


def test_the_ab_view_shows_both_slots_and_the_string_shows_the_other_placement(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        app.session.slots["A"] = Slot(QUARTER)
        app.session.slots["B"] = Slot(THIRD)
        async with app.run_test(size=(100, 34)) as pilot:
            await pilot.pause()
            app._use_sound("test sound")
            await pilot.press("ctrl+g", "ctrl+g")  # harmonics -> spectrum -> A/B
            await pilot.pause()
            view, text = app.view, screen_text(app)
            return view, text, app.compare.text, app.compare.comparison, app.player.velocity

    view, text, summary, comparison, velocity = run(body())
    assert view == "compare" and "A/B of E2" in text
    assert "only in A: harmonics 3 6 9 15 18 21" in summary and "only in B: 4 8 16 20" in summary
    assert "level" in text and "centroid" in text
    assert OTHER_PICKUP_MARK in text  # slot B's pickup at 1/3 on the string view
    n = comparison.levels_a_db.size  # the keyboard's velocity: no note has been played
    np.testing.assert_array_equal(comparison.levels_a_db, predicted_levels_db(QUARTER, 40, n, velocity))
    np.testing.assert_array_equal(comparison.levels_b_db, predicted_levels_db(THIRD, 40, n, velocity))
