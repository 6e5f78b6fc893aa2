#!/usr/bin/env python3
"""Write examples/demo.mid: "Lamplight Test Bench", a short piece of our own for the
README's example render and the benchmarks.

It exercises what a real performance sends: two tracks (type 1), a tempo change,
chords and arpeggios, the sustain pedal, a pitch-bend range set by RPN 0 and a bend.
Run it again to regenerate the file; the output is deterministic.
"""

from __future__ import annotations

import sys
from pathlib import Path

import mido

TICKS = 480  # per quarter note
OUT = Path(__file__).resolve().parents[1] / "examples" / "demo.mid"

# (bar, beat, length in beats, MIDI notes, velocity)
ARPEGGIO = [40, 47, 52, 55, 59, 64, 59, 55]
CHORDS = [(45, 52, 57, 60, 64), (43, 50, 55, 59, 62), (41, 48, 53, 57, 60), (40, 47, 52, 56, 59)]


def _track_events() -> tuple[list, list]:
    lead: list[tuple[int, mido.Message]] = []
    bass: list[tuple[int, mido.Message]] = []
    t = 0
    # Bars 1-4: an open-string arpeggio, eighth notes, pedal down per bar.
    for bar in range(4):
        lead.append((t, mido.Message("control_change", control=64, value=127)))
        for i, note in enumerate(ARPEGGIO):
            on = t + i * TICKS // 2
            vel = 70 + (i % 4) * 12
            lead.append((on, mido.Message("note_on", note=note + (2 if bar == 2 else 0), velocity=vel)))
            lead.append((on + TICKS // 2 - 10, mido.Message("note_off", note=note + (2 if bar == 2 else 0))))
        t += 4 * TICKS
        lead.append((t - 5, mido.Message("control_change", control=64, value=0)))
    # Bars 5-8: block chords, strummed with 15-tick spacing.
    for chord in CHORDS:
        for j, note in enumerate(chord):
            bass.append((t + j * 15, mido.Message("note_on", channel=1, note=note, velocity=96 - 6 * j)))
            bass.append((t + 3 * TICKS, mido.Message("note_off", channel=1, note=note)))
        t += 4 * TICKS
    # Bar 9: bend range 12 semitones (RPN 0), a held note bent up a whole tone and back.
    rpn = [(101, 0), (100, 0), (6, 12), (38, 0), (101, 127), (100, 127)]
    for cc, val in rpn:
        lead.append((t, mido.Message("control_change", control=cc, value=val)))
    lead.append((t, mido.Message("note_on", note=64, velocity=110)))
    for step in range(1, 25):
        bend = int(8191 * (2 / 12) * min(step, 48 - step) / 12)
        lead.append((t + TICKS + step * 20, mido.Message("pitchwheel", pitch=bend)))
    lead.append((t + 3 * TICKS, mido.Message("pitchwheel", pitch=0)))
    lead.append((t + 4 * TICKS, mido.Message("note_off", note=64)))
    t += 4 * TICKS
    # Bar 10: final low chord, let ring.
    for j, note in enumerate((28, 40, 47, 52)):
        bass.append((t + j * 30, mido.Message("note_on", channel=1, note=note, velocity=100)))
        bass.append((t + 8 * TICKS, mido.Message("note_off", channel=1, note=note)))
    return lead, bass


def _to_track(events: list, name: str, tempo_map: list | None = None) -> mido.MidiTrack:
    track = mido.MidiTrack()
    track.append(mido.MetaMessage("track_name", name=name, time=0))
    items = sorted(events + (tempo_map or []), key=lambda e: e[0])
    now = 0
    for tick, msg in items:
        track.append(msg.copy(time=tick - now))
        now = tick
    track.append(mido.MetaMessage("end_of_track", time=TICKS))
    return track


def build() -> mido.MidiFile:
    lead, bass = _track_events()
    tempo = [(0, mido.MetaMessage("set_tempo", tempo=mido.bpm2tempo(96))),
             (16 * TICKS, mido.MetaMessage("set_tempo", tempo=mido.bpm2tempo(84)))]
    mid = mido.MidiFile(type=1, ticks_per_beat=TICKS)
    mid.tracks.append(_to_track(lead, "lamplight lead", tempo))
    mid.tracks.append(_to_track(bass, "lamplight chords"))
    return mid


def main() -> int:
    OUT.parent.mkdir(parents=True, exist_ok=True)
    build().save(OUT)
    print(f"wrote {OUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
