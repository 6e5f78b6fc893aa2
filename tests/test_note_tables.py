"""Tables kept per note must give exactly the audio of tables built afresh, through every change that voids them."""

import numpy as np

from rtvoice.engine.note_tables import NoteTables
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings

FS = 48000.0


def play(engine: Engine) -> np.ndarray:
    """Repeated notes through releases, fades, re-plucks, bends and live changes of what the tables depend on."""
    out = []
    for i in range(260):
        events = []
        if i % 10 == 0:
            events += [(3, 0x90, 45, 90), (40, 0x90, 52, 80), (77, 0x91, 45, 70)]  # the same note on two channels
        if i % 10 == 5:
            events += [(20, 0x80, 45, 0), (90, 0x81, 45, 0)]
        if i % 30 == 17:
            events += [(0, 0xB0, 120, 0)]  # all sound off: fades
        if i == 100:
            events += [(10, 0xE0, 0, 80)]  # bend up: bent tables are built, not kept
        if i == 130:
            events += [(10, 0xE0, 0, 64)]
        out.append(engine.render(events).copy())
        if i == 150:
            engine.set_value("string.t60_low", 3.0)
        if i == 180:
            engine.set_value("tuning.a4_hz", 432.0)
        if i == 210:
            engine.set_value("electronics.resonance_hz", 2000.0)
        if i == 230:
            engine.set_value("string.release", 0.3)
    return np.concatenate(out)


def test_kept_tables_play_exactly_as_tables_built_afresh():
    # The reference is the same engine keeping nothing (every table built from the physics each time).
    settings = Settings.defaults().with_values({"voices": 6})
    keeping, building = Engine(settings, FS, 128), Engine(settings, FS, 128)
    building._tables = NoteTables(building.pool, 0)
    a, b = play(keeping), play(building)
    assert keeping._tables.hits > 50 and building._tables.hits == 0
    np.testing.assert_array_equal(a, b)
    assert np.abs(a).max() > 0.05
