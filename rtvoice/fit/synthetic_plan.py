"""The random choices of a synthetic take (see :mod:`rtvoice.fit.synthetic`): instrument, string, fret,
pluck, pickup(s), aperture, decay, resonance, detuning, tone, second polarisation, onset and level.

Distances are drawn to 0.01 mm, as a builder would write them, and held where the engine allows
a pluck or a pickup: short of the last fret, within most of the stopped string (12-TET fret rule,
speaking length L 2^(-n/12), common practice). They never coincide exactly, but nulls (a pluck
or pickup at 1/k of the string) are kept: the benchmark must show where the fit fails.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from rtvoice.engine import Settings, load_preset, resonance_of
from rtvoice.fit.synthetic_tone import ToneFilter, draw_tone_filter
from rtvoice.physics.frets import speaking_length_mm

TakeKind = Literal["single", "pair"]  # one pickup, or two mixed at equal level
#: The factory instruments whose notes go to strings and frets, distances in mm.
INSTRUMENT_PRESETS = ("cedar-six", "glass-bridge", "harbor-baritone", "low-four", "nylon-fingertip", "leaning-bridge")
PLUCK_RANGE_MM = (20.0, 200.0)
PICKUP_RANGE_MM = (20.0, 180.0)  # a real instrument's pickups lie in this range from the saddle
PLUCK_WIDTH_RANGE_MM = (0.0, 12.0)
APERTURE_RANGE_MM = (6.0, 20.0)
RESONANCE_RANGE_HZ = (2000.0, 7000.0)
Q_RANGE = (0.7, 4.0)
T60_SCALE_RANGE = (0.5, 1.6)  # times the preset string's T60s: short decays belong in the benchmark
MAX_FRET = 12
VELOCITY_RANGE = (50, 120)
DETUNE_CENTS = 3.0
ONSET_RANGE_S = (0.05, 0.3)
LEVEL_RANGE_DBFS = (-18.0, -3.0)  # the take's peak before the noise: a recording's level is arbitrary
BEAT_CENTS_RANGE = (0.5, 2.0)
BEAT_LEVEL_RANGE_DB = (-20.0, -10.0)
BEAT_T60_RATIO_RANGE = (0.6, 0.9)
MIN_GAP_MM = 1.0  # values never coincide exactly; nulls are kept (the benchmark must show where it fails)
PAIR_SPACING_MM = 20.0  # two pickups' centres: no closer than their housings allow
GROUP_SPACING_MM = 15.0  # plucks of a group of takes: far enough apart to tell the pickup's distance
ON_NOTE_LIMIT = 0.9  # pluck and pickups within this share of the stopped string
MAX_TRIES = 10000


@dataclass(frozen=True)
class Beating:
    """The second polarisation: its pitch relative to the first's (cents, signed), its level (dB,
    below the first's) and its T60s over the first's."""

    offset_cents: float
    level_db: float
    t60_ratio: float


@dataclass(frozen=True)
class TakePlan:
    """Every random choice of one take; :func:`rtvoice.fit.synthetic.make_take` renders it.

    ``resonance_hz`` and ``q`` None: the instrument has no coil (an optical sensor); ``t60_scale``
    multiplies the preset string's T60s; ``beating`` None: one polarisation only; ``snr_db`` None:
    no noise; ``tone`` None: no tone filter. ``beating.offset_cents`` is signed (the second
    polarisation may be flat)."""

    kind: TakeKind
    preset: str
    string: int
    fret: int
    velocity: int
    pluck_mm: float
    pluck_width_mm: float
    pickup_mm: tuple[float, ...]
    aperture_mm: float
    sensing: str
    resonance_hz: float | None
    q: float | None
    t60_scale: float
    detune_cents: float
    tone: ToneFilter | None
    beating: Beating | None
    snr_db: float | None
    onset_s: float
    level_dbfs: float
    noise_seed: int


def _uniform(rng: np.random.Generator, span: tuple[float, float]) -> float:
    return float(rng.uniform(*span))


def _log_uniform(rng: np.random.Generator, span: tuple[float, float]) -> float:
    return float(math.exp(rng.uniform(math.log(span[0]), math.log(span[1]))))


def _mm(rng: np.random.Generator, low: float, high: float) -> float:
    """A distance to 0.01 mm, as a builder would write it."""
    return round(float(rng.uniform(low, high)), 2)


def _distances(rng: np.random.Generator, count: int, span: tuple[float, float], limit_mm: float, spacing_mm: float,
               away_from: Sequence[float] = ()) -> tuple[float, ...]:
    """``count`` distances in ``span`` (held under ``limit_mm``), ``spacing_mm`` apart from one another and
    at least :data:`MIN_GAP_MM` from each of ``away_from``."""
    high = min(span[1], limit_mm)
    for _ in range(MAX_TRIES):
        values = tuple(_mm(rng, span[0], high) for _ in range(count))
        apart = all(abs(a - b) >= spacing_mm for i, a in enumerate(values) for b in values[i + 1:])
        if apart and all(abs(a - b) >= MIN_GAP_MM for a in values for b in away_from):
            return values
    raise ValueError(f"cannot place {count} distances {spacing_mm} mm apart in {span[0]} .. {high} mm")


def _reach_mm(settings: Settings, fret: int) -> float:
    """How far from the saddle a pluck or pickup may lie for a note at ``fret``: within
    :data:`ON_NOTE_LIMIT` of the stopped string, and short of the last fret (the engine refuses a
    pluck or pickup over the neck)."""
    scale_mm = float(settings.get("string.scale_length_mm"))
    last_fret_mm = float(speaking_length_mm(scale_mm, int(settings.get("instrument.frets"))))
    return min(ON_NOTE_LIMIT * float(speaking_length_mm(scale_mm, fret)), last_fret_mm - MIN_GAP_MM)


def _beating(rng: np.random.Generator) -> Beating:
    sign = 1.0 if rng.random() < 0.5 else -1.0
    return Beating(offset_cents=sign * _uniform(rng, BEAT_CENTS_RANGE), level_db=_uniform(rng, BEAT_LEVEL_RANGE_DB),
                   t60_ratio=_uniform(rng, BEAT_T60_RATIO_RANGE))


def draw_plan(rng: np.random.Generator, kind: TakeKind = "single", *, presets: Sequence[str] = INSTRUMENT_PRESETS,
              snr_db: float | None = 40.0, tone: bool = True, beating: bool = True) -> TakePlan:
    """A random take (see the module's note for the ranges). Everything is drawn whatever the flags, so
    ``tone=False`` leaves the other choices as they were; ``snr_db`` None: no noise."""
    if kind not in ("single", "pair"):
        raise ValueError(f"kind must be 'single' or 'pair', not {kind!r}")
    preset = str(presets[int(rng.integers(len(presets)))])
    base = load_preset(preset)
    string = int(rng.integers(1, len(base.strings) + 1))
    fret = int(rng.integers(0, min(MAX_FRET, int(base.get("instrument.frets"))) + 1))
    limit_mm = _reach_mm(base, fret)
    pickup_mm = _distances(rng, 2 if kind == "pair" else 1, PICKUP_RANGE_MM, limit_mm, PAIR_SPACING_MM)
    (pluck_mm,) = _distances(rng, 1, PLUCK_RANGE_MM, limit_mm, 0.0, pickup_mm)
    coil = resonance_of(base)[0] > 0
    resonance_hz, q = _log_uniform(rng, RESONANCE_RANGE_HZ), _log_uniform(rng, Q_RANGE)
    tone_filter = draw_tone_filter(rng)
    second = _beating(rng)
    return TakePlan(
        kind=kind, preset=preset, string=string, fret=fret, velocity=int(rng.integers(VELOCITY_RANGE[0],
                                                                                        VELOCITY_RANGE[1] + 1)),
        pluck_mm=pluck_mm, pluck_width_mm=_mm(rng, *PLUCK_WIDTH_RANGE_MM), pickup_mm=pickup_mm,
        aperture_mm=_mm(rng, *APERTURE_RANGE_MM), sensing=str(base.pickups[0]["sensing"]),
        resonance_hz=resonance_hz if coil else None, q=q if coil else None,
        t60_scale=_log_uniform(rng, T60_SCALE_RANGE), detune_cents=float(rng.uniform(-DETUNE_CENTS, DETUNE_CENTS)),
        tone=tone_filter if tone else None, beating=second if beating else None, snr_db=snr_db,
        onset_s=_uniform(rng, ONSET_RANGE_S), level_dbfs=_uniform(rng, LEVEL_RANGE_DBFS),
        noise_seed=int(rng.integers(2**62)))


def group_plans(rng: np.random.Generator, n_takes: int = 3, *, kind: TakeKind = "single",
                presets: Sequence[str] = INSTRUMENT_PRESETS, snr_db: float | None = 40.0, tone: bool = True,
                beating: bool = True, spacing_mm: float = GROUP_SPACING_MM) -> list[TakePlan]:
    """``n_takes`` plans of one note on one string through the same pickup(s), tone and detuning, plucked
    at spots ``spacing_mm`` apart or more, each with its own velocity, polarisation level, onset, level
    and noise."""
    base = draw_plan(rng, kind, presets=presets, snr_db=snr_db, tone=tone, beating=beating)
    limit_mm = _reach_mm(load_preset(base.preset), base.fret)
    plucks = _distances(rng, n_takes, PLUCK_RANGE_MM, limit_mm, spacing_mm, base.pickup_mm)
    plans = []
    for pluck_mm in plucks:
        second = _beating(rng)
        plans.append(replace(
            base, pluck_mm=pluck_mm, velocity=int(rng.integers(VELOCITY_RANGE[0], VELOCITY_RANGE[1] + 1)),
            beating=None if base.beating is None else replace(base.beating, level_db=second.level_db),
            onset_s=_uniform(rng, ONSET_RANGE_S), level_dbfs=_uniform(rng, LEVEL_RANGE_DBFS),
            noise_seed=int(rng.integers(2**62))))
    return plans


__all__ = ["GROUP_SPACING_MM", "INSTRUMENT_PRESETS", "Beating", "TakeKind", "TakePlan", "draw_plan", "group_plans"]
