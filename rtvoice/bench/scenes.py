"""Engine set-ups the benchmarks time: held chords with every feature on, idle pools.

"Every feature on" means two pickups with apertures (one velocity-sensing, one
displacement-sensing), the coil-and-cable resonance filter, the DC blocker and
limiter (always on) and a pickup moving all the time, so every block is rendered
with the smoothing ramp (the engine's most expensive path).

The chords are of open strings (``instrument.assign = "open"``): a six-string holds at most six
notes, and the grid times pools of up to 128 voices. The fretted instrument has scenes of its own
(:mod:`rtvoice.bench.fretted`).
"""

from __future__ import annotations

from dataclasses import dataclass

from rtvoice.engine import Engine, Settings, active_voices

SAMPLE_RATE_HZ = 48000
NOTE_ON = 0x90
#: Lowest note of the chords; notes climb one semitone per voice, 48 notes per channel.
CHORD_LOW_NOTE, NOTES_PER_CHANNEL = 40, 48
#: The moving pickup swings between these positions; a new target every few blocks
#: keeps its smoothing ramp active (it needs tens of blocks to settle).
SWING_POSITIONS = (0.12, 0.16)
SWING_EVERY_BLOCKS = 8

FEATURES = {
    "instrument.assign": "open",
    "pickup.0.position": SWING_POSITIONS[0],
    "pickup.0.width": 0.04,
    "pickup.0.sensing": "velocity",
    "pickup.1.position": 0.27,
    "pickup.1.width": 0.06,
    "pickup.1.sensing": "displacement",
    "pickup.1.level_db": -3.0,
    "electronics.resonance_hz": 4200.0,
    "electronics.q": 2.5,
}


def feature_settings(voices: int, modes: int, base: Settings | None = None) -> Settings:
    """Settings with every feature on, ``voices`` polyphony and ``modes`` modes per voice."""
    base = base or Settings.defaults()
    return base.with_values({**FEATURES, "voices": voices, "string.modes": modes}, "bench")


def chord_events(voices: int, velocity: int = 90) -> list[tuple[int, int, int, int]]:
    """Note-ons for ``voices`` distinct notes (distinct note and channel pairs), at offset 0."""
    events = []
    for i in range(voices):
        channel, step = divmod(i, NOTES_PER_CHANNEL)
        vel = velocity - 3 * (i % 5)
        events.append((0, NOTE_ON | channel, CHORD_LOW_NOTE + step, vel))
    return events


@dataclass
class HeldChord:
    """An engine holding a chord of ``voices`` notes, ready to render blocks.

    ``swing(i)`` moves the first pickup every few blocks (call it between timed
    renders) so the live-parameter ramp runs in every block when ``ramps`` is on.
    """

    engine: Engine
    voices: int
    ramps: bool

    @classmethod
    def start(cls, voices: int, modes: int, block_frames: int, ramps: bool = True,
              sample_rate_hz: int = SAMPLE_RATE_HZ) -> HeldChord:
        engine = Engine(feature_settings(voices, modes), sample_rate_hz, block_frames)
        engine.render(chord_events(voices))
        chord = cls(engine, voices, ramps)
        if ramps:
            chord.swing(0)
        return chord

    def swing(self, i: int) -> None:
        if self.ramps and i % SWING_EVERY_BLOCKS == 0:
            target = SWING_POSITIONS[(i // SWING_EVERY_BLOCKS) % 2]
            if self.engine.settings.get("pickup.0.position") != target:
                self.engine.set_value("pickup.0.position", target)
            else:
                self.engine.set_value("pickup.0.position", SWING_POSITIONS[0] + SWING_POSITIONS[1] - target)

    def render(self) -> None:
        self.engine.render(())

    @property
    def active(self) -> int:
        return active_voices(self.engine)
