"""What the rest of rtvoice may read of a running engine: its loudest voice's modes for the meters,
a held voice's state for the soak, the sounding partials for the bench's baselines.

Only the engine's own modules touch the voice pool's arrays; everything outside reads through
these functions (exported by :mod:`rtvoice.engine`). The meters' read-out runs inside the audio
callback, so it writes into the caller's buffers and allocates nothing of its own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rtvoice.engine.instrument import MAX_FRETS, OPEN_PLACES, Placement, string_and_fret
from rtvoice.engine.renderer import OUTPUT_SCALE, Engine
from rtvoice.engine.voices import FADING, HELD


@dataclass
class VoiceReadout:
    """How many modes were written, and whose: the loudest voice's note and velocity, and how many
    voices sound (not fading). ``modes == 0`` when nothing sounds."""

    modes: int = 0
    note: int = -1
    velocity: int = 0
    voices: int = 0
    string: int = 0  # where the loudest voice sounds on a fretted instrument (1 = highest); 0 under the open rule
    fret: int = -1


def loudest_voice_into(engine: Engine, levels: np.ndarray, freqs_hz: np.ndarray, work: np.ndarray,
                       gain: float, into: VoiceReadout) -> VoiceReadout:
    """Write |g s| x OUTPUT_SCALE x ``gain`` of the loudest voice's first modes into ``levels`` and
    their frequencies in Hz into ``freqs_hz`` (as many as the buffers hold); ``work`` is a complex
    scratch buffer of the same length. Fills and returns ``into`` (callback side: no allocation
    beyond numpy's scalars)."""
    pool = engine.pool
    n = pool.n_active
    if n == 0:
        into.modes, into.note, into.velocity, into.voices = 0, -1, 0, 0
        into.string, into.fret = 0, -1
        return into
    v = engine.loudest_voice()
    m = min(pool.modes, levels.size)
    np.multiply(pool.g[v, :m], pool.s[v, :m], out=work[:m])
    np.abs(work[:m], out=levels[:m])
    levels[:m] *= OUTPUT_SCALE * gain
    np.multiply(pool.omega[v, :m], 1 / (2 * np.pi), out=freqs_hz[:m])
    into.modes, into.note, into.velocity = m, int(pool.note[v]), int(pool.velocity[v])
    into.string, into.fret = string_and_fret(int(pool.place[v]))
    into.voices = int(np.count_nonzero(pool.state[:n] != FADING))
    return into


def take_placements(engine: Engine) -> list[Placement]:
    """Where the notes started since the last call sounded (string and fret), oldest first; the
    engine keeps the latest few thousand between calls."""
    kept = engine.performer.placements
    taken = list(kept)
    kept.clear()
    return taken


@dataclass(frozen=True)
class SoundingPlace:
    """A voice still sounding (not fading) on a fretted instrument: its string, fret and note, and its
    level bound (linear, output units before the gain) as the retire check last measured it."""

    string: int
    fret: int
    note: int
    level: float


def sounding_places(engine: Engine) -> list[SoundingPlace]:
    """Every voice sounding on a string and fret, loudest first (none under the open rule)."""
    pool = engine.pool
    n = pool.n_active
    out = []
    for v in range(n):
        string, fret = string_and_fret(int(pool.place[v]))
        if string and pool.state[v] != FADING:
            out.append(SoundingPlace(string, fret, int(pool.note[v]), float(pool.level[v])))
    return sorted(out, key=lambda p: -p.level)


def sounding_places_into(engine: Engine, frets: np.ndarray, levels: np.ndarray) -> int:
    """Per string, the fret its sounding voice plays (``frets[string - 1]``, -1 when the string is
    silent or fading) and that voice's level bound (``levels``, linear, output units before the gain);
    returns how many strings sound. For the audio callback: writes into the caller's arrays, one
    entry per string they hold, and allocates no array (one pass over the active slots)."""
    frets[:] = -1
    levels[:] = 0.0
    pool = engine.pool
    count = 0
    per_string = MAX_FRETS + 1
    for v in range(pool.n_active):
        rel = int(pool.place[v]) - OPEN_PLACES
        if rel < 0 or pool.state[v] == FADING:
            continue
        string0 = rel // per_string
        if string0 < frets.size:
            count += frets[string0] < 0
            frets[string0] = rel - string0 * per_string
            levels[string0] = pool.level[v]
    return count


def held_voice(engine: Engine, note: int, channel: int) -> int:
    """Slot of the one voice holding ``note`` on ``channel`` under the sustain pedal, else -1."""
    pool = engine.pool
    n = pool.n_active
    hit = np.flatnonzero((pool.note[:n] == note) & (pool.channel[:n] == channel) & (pool.state[:n] == HELD))
    return int(hit[0]) if hit.size == 1 else -1


def voice_amplitudes(engine: Engine, slot: int) -> np.ndarray:
    """A copy of the complex mode amplitudes of voice ``slot`` (double precision)."""
    amplitudes: np.ndarray = engine.pool.s[slot].copy()
    return amplitudes


def active_voices(engine: Engine) -> int:
    """Voices the engine is rendering now (sounding, held, released or fading): 0 when silent."""
    return int(engine.pool.n_active)


def pool_token(engine: Engine) -> object:
    """An object that changes when the engine rebuilds its voice pool (``voices`` or ``string.modes``
    changed and the old voices faded), and only then: compare with ``is``."""
    return engine.pool


def modes_per_voice(engine: Engine) -> int:
    """The pool's modes per voice (``string.modes`` as the pool was built)."""
    return int(engine.pool.modes)


def sounding_partials(engine: Engine) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(complex output amplitude, per-sample pole, frequency in Hz) of every mode of every active
    voice, copies: what a modal sum of the same notes would start from (the bench's baselines)."""
    pool = engine.pool
    n = pool.n_active
    amplitude = pool.g[:n] * pool.s[:n] * OUTPUT_SCALE
    pole = np.exp((-pool.sigma[:n] + 1j * pool.omega[:n]) / engine.fs)
    return amplitude.copy(), pole, pool.omega[:n] / (2 * np.pi)
