"""Synthetic takes with known answers, for measuring how well ``rtvoice fit`` reads a note.

A take is one note on one string at one fret of a factory instrument, rendered by the engine
exactly as ``rtvoice render --note N --string S`` plays it (the channel rule: MIDI channel S
plays string S), with the pluck, the pickup(s), the aperture, the decay and the pickup's
resonance drawn at random. Then what a real recording brings and the engine does not: a
second polarisation beating against the first (a second render a little sharper, decaying
differently, 10..20 dB lower), a slight detuning (A4 moved by up to +-3 cents), an unknown
amplifier-like tone filter (:mod:`rtvoice.fit.synthetic_tone`), silence before the onset and
white noise at a set SNR. Every choice comes from the random generator it is given, so a
seed gives the same takes.

Distances are in mm from the bridge saddle; a fret n shortens the string to L 2^(-n/12)
(12-TET fret rule, common practice) while the pluck and the pickups stay on the body.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from rtvoice.engine import (
    CEILING_DBFS,
    Settings,
    load_preset,
    placed_note,
    preset_text,
    resonance_of,
    t60s_of,
)
from rtvoice.fit.synthetic_plan import (
    GROUP_SPACING_MM,
    INSTRUMENT_PRESETS,
    Beating,
    TakeKind,
    TakePlan,
    draw_plan,
    group_plans,
)
from rtvoice.fit.synthetic_tone import ToneFilter, add_noise
from rtvoice.offline.render import DEFAULT_RENDER_BLOCK, PlayReport, iter_blocks, note_events
from rtvoice.physics.frets import speaking_length_mm
from rtvoice.physics.tuning import midi_note_to_hz

MAX_MODES = 512  # the engine's most modes per voice
MODE_CUTOFF = 0.45  # of the sample rate: the engine leaves out modes above it
RENDER_GAIN_DB = -18.0  # low enough that the limiter never acts (below), resonance peaks and all
UNTOUCHED = 10.0 ** ((CEILING_DBFS - 7.5) / 20.0)  # the limiter passes samples 7 dB under its ceiling bit for bit
DEFAULT_SECONDS = 2.0


@dataclass(frozen=True)
class TakeTruth:
    """What a take contains. ``f0_hz`` is the unstiffened fundamental of the take, detuning included:
    the partials lie at f_k = k f0 sqrt(1 + B k^2) (Fletcher 1964), B = ``inharmonicity`` of the
    stopped string; ``nominal_f0_hz`` is the note's 12-TET frequency before the detuning. T60s are at
    100 Hz and 2000 Hz (the first polarisation's). Distances are mm from the saddle; ``pickup_mm``
    one per pickup (mixed at equal level), all with aperture ``aperture_mm`` and ``sensing``.
    ``resonance_hz`` and ``q`` are None without a coil. ``snr_db`` is relative to the note's mean
    power over its first second; ``level_dbfs`` its peak before the noise; ``gain_db`` the gain from the
    engine's render to the take (the take is gain x tone(render) + noise)."""

    kind: TakeKind
    preset: str
    string: int
    fret: int
    note: int
    velocity: int
    f0_hz: float
    nominal_f0_hz: float
    inharmonicity: float
    t60_low_s: float
    t60_high_s: float
    scale_length_mm: float
    speaking_length_mm: float
    pluck_mm: float
    pluck_width_mm: float
    pickup_mm: tuple[float, ...]
    aperture_mm: float
    sensing: str
    resonance_hz: float | None
    q: float | None
    detune_cents: float
    snr_db: float | None
    tone_filter: ToneFilter | None
    beating: Beating | None
    onset_s: float
    level_dbfs: float
    gain_db: float

    def partial_hz(self, k: int) -> float:
        """Frequency of partial ``k`` (the first polarisation's)."""
        return k * self.f0_hz * math.sqrt(1.0 + self.inharmonicity * k * k)

    @property
    def pluck_fraction(self) -> float:
        """The pluck as a fraction of the stopped string, from the saddle."""
        return self.pluck_mm / self.speaking_length_mm

    @property
    def pickup_fractions(self) -> tuple[float, ...]:
        return tuple(d / self.speaking_length_mm for d in self.pickup_mm)

    def summary(self) -> str:
        pickups = " + ".join(f"{d:.1f}" for d in self.pickup_mm)
        return (f"{self.preset} string {self.string} fret {self.fret} (note {self.note}, f0 {self.f0_hz:.3f} Hz, "
                f"B {self.inharmonicity:.3g}): pluck {self.pluck_mm:.1f} mm ({self.pluck_width_mm:.1f} mm wide), "
                f"pickup {pickups} mm ({self.aperture_mm:.1f} mm, {self.sensing})")


@dataclass(frozen=True)
class SyntheticTake:
    """A take's samples (float64, mono), its rate, its truth and the truth's preset as TOML."""

    samples: np.ndarray
    sample_rate_hz: int
    truth: TakeTruth
    settings_text: str


# -- rendering ------------------------------------------------------------------------------------

def render_truth(settings: Settings, string: int, fret: int, *, seconds: float, sample_rate_hz: int = 48000,
                 velocity: int = 100) -> np.ndarray:
    """The clean engine render of the note at ``string`` (1 = the highest) and ``fret``, ``seconds`` long.

    The note is played on MIDI channel ``string`` under the channel rule, as ``rtvoice render --note N
    --string S`` does it (``rtvoice.commands.render.on_string``, which this layer may not import);
    SettingsError when the instrument has no such string or fret, ValueError if the engine put the
    note anywhere else."""
    placed = placed_note(settings, string, fret)
    played = settings.with_values({"instrument.assign": "channel"}, source="synthetic take")
    report = PlayReport()
    events = note_events(placed.note, velocity, seconds, channel=string - 1)
    blocks = [b.copy() for b in iter_blocks(events, played, sample_rate_hz, DEFAULT_RENDER_BLOCK, 0.0,
                                            report=report)]
    where = [(p.string, p.fret) for p in report.placements]
    if where != [(string, fret)]:
        raise ValueError(f"the engine played note {placed.note} at (string, fret) {where}, not {(string, fret)}")
    frames = int(round(seconds * sample_rate_hz))
    out = np.concatenate(blocks)[:frames]
    if out.size < frames:
        raise ValueError(f"the render holds {out.size} frames, not {frames}")
    return out


def plan_settings(plan: TakePlan, sample_rate_hz: int, polarisation: int = 1) -> Settings:
    """The settings that render ``plan`` (``polarisation`` 2: its second polarisation, a little sharper
    and decaying differently)."""
    base = load_preset(plan.preset).with_pickup_count(len(plan.pickup_mm))
    cents = plan.detune_cents
    t60_scale = plan.t60_scale
    if polarisation == 2:
        if plan.beating is None:
            raise ValueError("the plan has no second polarisation")
        cents += plan.beating.offset_cents
        t60_scale *= plan.beating.t60_ratio
    a4_hz = float(base.get("tuning.a4_hz")) * 2.0 ** (cents / 1200.0)
    note = int(base.strings[plan.string - 1].note) + plan.fret
    f0_hz = float(midi_note_to_hz(note, a4_hz))
    # Every partial a string has up to the engine's limit, as a real string has them.
    modes = min(MAX_MODES, max(int(base.get("string.modes")), math.ceil(MODE_CUTOFF * sample_rate_hz / f0_hz)))
    t60_low, t60_high = t60s_of(base, plan.string)
    changes: dict[str, object] = {
        "tuning.a4_hz": a4_hz, "string.modes": modes, "output.gain_db": RENDER_GAIN_DB,
        "excitation.kind": "pluck", "excitation.shape": [],
        "excitation.position": f"{plan.pluck_mm!r}mm", "excitation.width": f"{plan.pluck_width_mm!r}mm",
        "electronics.inductance_h": 0.0, "electronics.resonance_hz": plan.resonance_hz or 0.0,
        f"strings.{plan.string}.t60_low": t60_low * t60_scale, f"strings.{plan.string}.t60_high": t60_high * t60_scale,
    }
    if plan.q is not None:
        changes["electronics.q"] = plan.q
    for i, distance in enumerate(plan.pickup_mm):
        changes |= {f"pickup.{i}.position": f"{distance!r}mm", f"pickup.{i}.slant": 0.0,
                    f"pickup.{i}.width": f"{plan.aperture_mm!r}mm", f"pickup.{i}.sensing": plan.sensing,
                    f"pickup.{i}.level_db": 0.0, f"pickup.{i}.polarity": 1}
    return base.with_values(changes, source="synthetic take")


def _untouched(render: np.ndarray) -> np.ndarray:
    """``render``, checked to lie where the engine's limiter passes samples bit for bit."""
    peak = float(np.max(np.abs(render)))
    if not 0.0 < peak < UNTOUCHED:
        raise ValueError(f"the clean render peaks at {peak:.3g}: the limiter may have shaped it")
    return render


def make_take(plan: TakePlan, sample_rate_hz: int = 48000, seconds: float = DEFAULT_SECONDS) -> SyntheticTake:
    """Render ``plan``: ``onset_s`` of silence, then ``seconds`` of the note with its impairments."""
    fs = sample_rate_hz
    settings = plan_settings(plan, fs)
    note = _untouched(render_truth(settings, plan.string, plan.fret, seconds=seconds, sample_rate_hz=fs,
                                   velocity=plan.velocity))
    if plan.beating is not None:  # each render passed the limiter on its own; their sum never did
        second = _untouched(render_truth(plan_settings(plan, fs, polarisation=2), plan.string, plan.fret,
                                         seconds=seconds, sample_rate_hz=fs, velocity=plan.velocity))
        note = note + 10.0 ** (plan.beating.level_db / 20.0) * second
    onset = int(round(plan.onset_s * fs))
    x = np.concatenate([np.zeros(onset), note])
    if plan.tone is not None:
        x = plan.tone.apply(x, fs)
    gain = 10.0 ** (plan.level_dbfs / 20.0) / float(np.max(np.abs(x)))
    x *= gain
    if plan.snr_db is not None:
        x = add_noise(x, onset, plan.snr_db, fs, np.random.default_rng(plan.noise_seed))
    truth = truth_of(plan, settings, onset / fs, 20.0 * math.log10(gain))
    text = preset_text(settings.renamed(f"synthetic-{plan.preset}", description=f"Synthetic take: {truth.summary()}"))
    return SyntheticTake(samples=x.astype(np.float64), sample_rate_hz=fs, truth=truth, settings_text=text)


def truth_of(plan: TakePlan, settings: Settings, onset_s: float, gain_db: float) -> TakeTruth:
    """The truth of ``plan`` as ``settings`` (its first polarisation) hold it."""
    placed = placed_note(settings, plan.string, plan.fret)
    scale_mm = float(settings.get("string.scale_length_mm"))
    pickups = settings.pickups
    resonance_hz, q = resonance_of(settings)
    nominal_a4 = float(settings.get("tuning.a4_hz")) * 2.0 ** (-plan.detune_cents / 1200.0)
    return TakeTruth(
        kind=plan.kind, preset=plan.preset, string=plan.string, fret=plan.fret, note=placed.note,
        velocity=plan.velocity, f0_hz=placed.f0_hz, nominal_f0_hz=float(midi_note_to_hz(placed.note, nominal_a4)),
        inharmonicity=placed.inharmonicity, t60_low_s=placed.t60_low_s, t60_high_s=placed.t60_high_s,
        scale_length_mm=scale_mm, speaking_length_mm=float(speaking_length_mm(scale_mm, plan.fret)),
        pluck_mm=float(settings.get("excitation.position")) * scale_mm,
        pluck_width_mm=float(settings.get("excitation.width")) * scale_mm,
        pickup_mm=tuple(float(p["position"]) * scale_mm for p in pickups),
        aperture_mm=float(pickups[0]["width"]) * scale_mm, sensing=str(pickups[0]["sensing"]),
        resonance_hz=resonance_hz if resonance_hz > 0 else None, q=q if resonance_hz > 0 else None,
        detune_cents=plan.detune_cents, snr_db=plan.snr_db, tone_filter=plan.tone, beating=plan.beating,
        onset_s=onset_s, level_dbfs=plan.level_dbfs, gain_db=gain_db)



def synthetic_take(rng: np.random.Generator, *, kind: TakeKind = "single", sample_rate_hz: int = 48000,
                   seconds: float = DEFAULT_SECONDS, snr_db: float | None = 40.0, tone: bool = True,
                   beating: bool = True, presets: Sequence[str] = INSTRUMENT_PRESETS) -> SyntheticTake:
    """One random take (:func:`draw_plan`, then :func:`make_take`)."""
    plan = draw_plan(rng, kind, presets=presets, snr_db=snr_db, tone=tone, beating=beating)
    return make_take(plan, sample_rate_hz, seconds)


def synthetic_takes(n: int, seed: int, *, kinds: Sequence[TakeKind] = ("single", "pair"),
                    sample_rate_hz: int = 48000, seconds: float = DEFAULT_SECONDS, snr_db: float | None = 40.0,
                    tone: bool = True, beating: bool = True,
                    presets: Sequence[str] = INSTRUMENT_PRESETS) -> Iterator[SyntheticTake]:
    """``n`` takes, take i of kind ``kinds[i % len(kinds)]``, each from its own generator spawned from
    ``seed``: the first takes of a longer run are the same takes."""
    for i, child in enumerate(np.random.SeedSequence(seed).spawn(n)):
        yield synthetic_take(np.random.default_rng(child), kind=kinds[i % len(kinds)], sample_rate_hz=sample_rate_hz,
                             seconds=seconds, snr_db=snr_db, tone=tone, beating=beating, presets=presets)


def group_takes(rng: np.random.Generator, n_takes: int = 3, *, kind: TakeKind = "single", sample_rate_hz: int = 48000,
                seconds: float = DEFAULT_SECONDS, snr_db: float | None = 40.0, tone: bool = True,
                beating: bool = True, presets: Sequence[str] = INSTRUMENT_PRESETS,
                spacing_mm: float = GROUP_SPACING_MM) -> list[SyntheticTake]:
    """``n_takes`` takes of one note on one string through the same pickup(s), tone and detuning, plucked
    at spots ``spacing_mm`` apart or more (:func:`~rtvoice.fit.synthetic_plan.group_plans`), for fitting
    several takes together."""
    plans = group_plans(rng, n_takes, kind=kind, presets=presets, snr_db=snr_db, tone=tone, beating=beating,
                        spacing_mm=spacing_mm)
    return [make_take(plan, sample_rate_hz, seconds) for plan in plans]


__all__ = ["INSTRUMENT_PRESETS", "Beating", "SyntheticTake", "TakeKind", "TakePlan", "TakeTruth", "draw_plan",
           "group_plans", "group_takes", "make_take", "plan_settings", "render_truth", "synthetic_take",
           "synthetic_takes", "truth_of"]
