"""The survey view in the UI: the map is the survey's, and its cursor moves the live sound."""

import asyncio

import numpy as np
import pytest
from support.ui import fresh, wait_for

from rtvoice.engine import Settings
from rtvoice.survey import survey_grid
from rtvoice.ui.app import RtvoiceApp
from rtvoice.ui.screens.survey import SHADES, SurveyScreen, map_grids

pytestmark = pytest.mark.usefixtures("home")  # a user folder of its own for every test (conftest.py)


def test_map_cursor_moves_the_live_pickup_and_pluck(link):
    async def body():
        app = RtvoiceApp(fresh(link), safety_note=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            await pilot.press("f2")
            await pilot.pause()
            screen = app.screen
            assert isinstance(screen, SurveyScreen)
            col0, row0 = screen.col, screen.row
            await pilot.press("right", "right", "right", "down")
            await pilot.pause()
            want_x, want_p = screen.pickups[col0 + 3], screen.plucks[row0 + 1]
            ok = await wait_for(pilot, lambda: link.settings.get("pickup.0.position") == pytest.approx(want_x))
            text = screen.map_text()
            await pilot.press("escape")
            await pilot.pause()
            return app, ok, want_x, want_p, text, screen

    app, ok, want_x, want_p, text, screen = asyncio.run(body())
    assert ok  # the engine process got the new pickup position
    assert app.session.settings.get("pickup.0.position") == pytest.approx(want_x)
    assert app.session.settings.get("excitation.position") == pytest.approx(want_p)
    assert "[" in text and "]" in text


def test_map_shades_follow_the_survey_centroid(link):
    # The shading is the survey's spectral centroid: brighter towards the bridge (common practice among
    # players and builders), and the brightest cell is where survey_grid puts the highest centroid.
    settings = fresh(link).settings
    screen = SurveyScreen(settings, 40)
    pickups, plucks = map_grids(settings)
    plane = survey_grid(settings, 40, pickups, plucks)
    shades = np.array([[SHADES.index(ch) for ch in row] for row in screen.rows])
    i, j = np.unravel_index(np.argmax(plane.centroid_ratio), plane.centroid_ratio.shape)
    assert shades[i, j] == len(SHADES) - 1
    assert shades[:, :8].mean() > shades[:, -8:].mean()


def test_the_map_keeps_short_of_the_last_fret_on_a_fretted_neck():
    """The 12-TET fret rule (common practice): the 22nd fret of a 648 mm scale lies
    648 * 2^(-22/12) = 181.8 mm from the saddle; the map's pickups and plucks stay short of it, and
    the same sound with every note an open string reaches the middle of the string."""
    fretted = Settings.defaults()  # the six-string, hand rule
    last_fret_fraction = 2 ** (-22 / 12)
    for grid in map_grids(fretted):
        assert grid.max() < last_fret_fraction
        assert grid.max() > last_fret_fraction - 2.0 / 648.0  # ...and reaches to within 2 mm of it
    for grid in map_grids(fretted.with_values({"instrument.assign": "open"})):
        assert grid.max() == 0.5
