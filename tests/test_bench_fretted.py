"""The bench's fretted scene plays what it says: the default six-string, one note per string, a note
starting every few blocks on the string and fret the tremolo names (the timings themselves are
figures for `rtvoice bench`, never asserted here)."""

from __future__ import annotations

from rtvoice.bench.fretted import NOTE_EVERY_BLOCKS, fretted_settings, time_fretted, tremolo_note
from rtvoice.engine import Engine, Instrument, sounding_places


def test_the_tremolo_walks_the_strings_and_climbs_the_frets():
    settings = fretted_settings(32)
    instrument = Instrument.from_settings(settings)
    placed = [instrument.choose(note, status & 0x0F, ()) for _, status, note, _ in
              (tremolo_note(i, settings) for i in range(12))]
    # channel n plays string n + 1 (the channel rule: MIDI guitar controllers, common practice)
    assert [(p.string, p.fret) for p in placed if p] == [(s, 0) for s in range(1, 7)] + [(s, 3) for s in range(1, 7)]


def test_the_fretted_scene_holds_one_note_per_string_and_plays_every_note():
    timing = time_fretted(128, 30, modes=32, warmup=6)
    assert timing.unplayable == 0
    assert timing.note_on_blocks.count == 30 // NOTE_EVERY_BLOCKS
    assert timing.note_on_blocks.count + timing.other_blocks.count == timing.every_block.count == 30
    engine = Engine(fretted_settings(32), 48000, 128)
    for i in range(18):
        engine.render([tremolo_note(i, engine.settings)])
    strings = [p.string for p in sounding_places(engine)]  # fading voices are not listed
    assert sorted(strings) == [1, 2, 3, 4, 5, 6]  # one note per string: the older ones fade
