"""Tables and start rows kept per note must give exactly the audio of ones built afresh, through every change
that voids them."""

import numpy as np

from rtvoice.engine.note_starts import NoteStarts
from rtvoice.engine.note_tables import DECAY_FADE_AFTER_RELEASE, NoteTables
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
        if i % 10 == 7:
            events += [(50, 0x80, 52, 0), (50, 0x90, 52, 85)]  # a re-pluck after its note-off, on one sample
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
    # The reference is the same engine keeping nothing (every table and start row built from the physics
    # each time).
    settings = Settings.defaults().with_values({"voices": 6})
    keeping, building = Engine(settings, FS, 128), Engine(settings, FS, 128)
    building.voice_renderer.tables = NoteTables(building.pool, 0)
    # as many places as the engine's own rows hold (on a fretted neck a place is a string and fret, not a note)
    building.voice_renderer.starts = NoteStarts(building.pool.modes, FS, keep=False,
                                                places=building.voice_renderer.starts.places)
    a, b = play(keeping), play(building)
    assert keeping.voice_renderer.tables.hits > 50 and building.voice_renderer.tables.hits == 0
    assert keeping.voice_renderer.starts.hits > 50 and building.voice_renderer.starts.hits == 0
    np.testing.assert_array_equal(a, b)
    assert np.abs(a).max() > 0.05


def test_note_off_and_re_pluck_on_one_sample_fade_from_the_released_rate():
    # The two changes of the old voice on one sample are applied as one step: it must end where the
    # release and then the fade leave it (the fade's rate or the release's, whichever is faster).
    from rtvoice.engine.exact_path import FADE_T60_S
    from rtvoice.physics.damping import LN_1000, release_rate_per_s

    engine = Engine(Settings.defaults().with_values({"voices": 4}), FS, 128)
    engine.render([(0, 0x90, 45, 90)])
    engine.render([(30, 0x80, 45, 0), (30, 0x90, 45, 90)])
    pool = engine.pool
    old = [v for v in range(pool.n_active) if pool.note[v] == 45 and pool.decay[v] == DECAY_FADE_AFTER_RELEASE]
    assert len(old) == 1 and pool.n_active == 2
    v = old[0]
    released = release_rate_per_s(pool.sigma_hold[v], engine.settings.get("string.release"))
    np.testing.assert_array_equal(pool.sigma[v], np.maximum(released, LN_1000 / FADE_T60_S))
