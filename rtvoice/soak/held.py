"""The sustained note of a soak run, checked against the closed form of a damped mode.

A mode k of a held note has the complex amplitude s_k(t) = s_k(0) exp((-sigma_k + i omega_k) t):
- omega_k = 2 pi f_k, f_k = k f0 sqrt(1 + B k^2) (Fletcher, JASA 36, 1964: stiff string),
  rtvoice.physics.modes.mode_frequencies_hz, with f0 = 440 * 2^((n - 69) / 12) (12-TET, ISO 16),
  rtvoice.physics.tuning.midi_note_to_hz;
- sigma_k = b1 + b3 omega_k^2 (Chaigne & Askenfelt, JASA 95(2), 1994), with (b1, b3) set by the
  T60s at 100 Hz and 2000 Hz: rtvoice.physics.damping.loss_coefficients and decay_rate_per_s;
- s_k(0) = (v / 127)^2 a_k with a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)) sinc(k w / 2), the
  rounded-triangle pluck (Fletcher & Rossing, The Physics of Musical Instruments, 1998, ch. 2),
  rtvoice.physics.excitation.pluck_amplitudes; v^2 is the engine's velocity law (common practice).

The engine advances s_k by one complex factor per block. Drift is the change, since the first
check after the note-on, of the engine's s_k relative to the closed form: its phase (radians)
and its level (natural log of the magnitude ratio, reported in dB). In float64 each block adds
a rounding of a few units in the last place (u = 2^-53) to the phase and the magnitude, and the
factor's own phase omega N / fs is rounded once, which repeats every block. Over n blocks and
time t the bound is therefore u (c1 n + c2 |omega| t) per mode; :func:`drift_tolerance` uses
c1 = 8 (a complex product rounds by at most sqrt(5) u, exp() by a few u, both for the engine and
for the reference) and c2 = 8: omega_k is formed from f0, k, sqrt(1 + B k^2) and 2 pi in a
different order by the engine and by rtvoice.physics (up to 2 u each), the engine rounds its
per-block rotation omega N / fs (2 u) and the reference its omega t (2 u). A systematic error
of that size is a frequency offset of 1e-15 relative: drift means anything larger.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from rtvoice.engine import Settings, held_voice, modes_per_voice, voice_amplitudes
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients
from rtvoice.physics.excitation import pluck_amplitudes
from rtvoice.physics.modes import NYQUIST_MARGIN, mode_frequencies_hz
from rtvoice.physics.tuning import midi_note_to_hz
from rtvoice.soak.traffic import HELD_CHANNEL

UNIT_ROUNDOFF = 2.0**-53
#: Modes whose closed-form amplitude is below this are not compared: a mode on a node of the
#: pluck starts as rounding residue (sin(k pi p) = 1e-16 instead of 0), and the engine clears
#: amplitudes under 1e-30 (rtvoice.engine.voices.SILENT_MODE). 1e-20 is -400 dB: far below
#: hearing, far above both.
MEASURABLE = 1e-20
HELD_NOTE = 45  # A2, 110 Hz: every mode of 96 lies below the Nyquist margin
HELD_VELOCITY = 127
#: The sound of the held note: long T60s (the schema's longest is 60 s) so it stays far above
#: the retire level for a whole segment, a plain pluck so the closed form applies, and each note an
#: open string of its own (a fretted preset's string would have its own stiffness and loss).
HOLD_VALUES = {"instrument.assign": "open", "string.t60_low": 60.0, "string.t60_high": 40.0,
               "string.inharmonicity": 1e-4, "tuning.a4_hz": 440.0, "excitation.kind": "pluck",
               "excitation.position": 0.2, "excitation.width": 0.01, "excitation.shape": ()}


def drift_tolerance(omega: np.ndarray, t_s: float, blocks: int) -> np.ndarray:
    """Largest float64 rounding drift (radians of phase, or natural-log level) after ``blocks`` blocks."""
    return UNIT_ROUNDOFF * (8.0 * blocks + 8.0 * np.abs(omega) * t_s + 8.0)


@dataclass
class Segment:
    """One pluck of the held note and what its checks found."""

    start_block: int
    modes: int
    omega: np.ndarray
    sigma: np.ndarray
    s0: np.ndarray
    ref_block: int = -1
    ref_state: np.ndarray | None = None
    last_block: int = -1
    cut_short: bool = False  # the voice vanished (stolen) before the segment ended
    ended: bool = False  # closed on purpose (the pool is rebuilt)
    max_phase_rad: float = 0.0
    max_level: float = 0.0  # natural log of the magnitude ratio
    worst_ratio: float = 0.0  # drift / tolerance, worst over checks and modes
    initial_rel: float = 0.0  # |s - closed form from the note-on| / |closed form| at the reference
    checks: int = 0
    level_db_now: float = 0.0  # the fundamental's level at the last check, dB re its note-on level
    worst_detail: dict = field(default_factory=dict)


@dataclass
class HeldSummary:
    """Every segment's findings, folded in as each one closes (so a long run keeps no arrays)."""

    segments: int = 0
    cut_short: int = 0
    checked_blocks: int = 0
    checks: int = 0
    max_phase_rad: float = 0.0
    max_level: float = 0.0
    worst_ratio: float = 0.0
    worst_detail: dict = field(default_factory=dict)
    max_initial_rel: float = 0.0
    lowest_level_db: float = 0.0

    def fold(self, seg: Segment) -> None:
        self.segments += 1
        self.cut_short += seg.cut_short
        self.checked_blocks += max(0, seg.last_block - seg.ref_block)
        self.checks += seg.checks
        self.max_phase_rad = max(self.max_phase_rad, seg.max_phase_rad)
        self.max_level = max(self.max_level, seg.max_level)
        if seg.worst_ratio > self.worst_ratio:
            self.worst_ratio, self.worst_detail = seg.worst_ratio, seg.worst_detail
        self.max_initial_rel = max(self.max_initial_rel, seg.initial_rel)
        self.lowest_level_db = min(self.lowest_level_db, seg.level_db_now)


class HeldNote:
    """Plucks the held note on :data:`HELD_CHANNEL` and compares its modes with the closed form."""

    def __init__(self, sample_rate_hz: float, block_frames: int):
        self.fs = float(sample_rate_hz)
        self.block = block_frames
        self.current: Segment | None = None
        self.summary = HeldSummary()

    def finish(self) -> HeldSummary:
        """Fold the open segment into the summary and return it."""
        if self.current is not None:
            self.summary.fold(self.current)
            self.current = None
        return self.summary

    def settings_for_pluck(self, traffic: Settings) -> Settings:
        return traffic.with_values(HOLD_VALUES)

    def pluck_events(self) -> list[tuple[int, int, int, int]]:
        """Pedal down, note on at sample 0 of the block, note off (the pedal holds it)."""
        ch = HELD_CHANNEL
        return [(0, 0xB0 | ch, 64, 127), (0, 0x90 | ch, HELD_NOTE, HELD_VELOCITY), (1, 0x80 | ch, HELD_NOTE, 0)]

    def start(self, block_index: int, settings: Settings) -> None:
        """A pluck rendered in block ``block_index`` with ``settings`` (call after that block)."""
        modes = settings.get("string.modes")
        f = mode_frequencies_hz(midi_note_to_hz(HELD_NOTE, settings.get("tuning.a4_hz")),
                                settings.get("string.inharmonicity"), modes)
        b1, b3 = loss_coefficients(settings.get("string.t60_low"), settings.get("string.t60_high"))
        k = np.arange(1, modes + 1, dtype=float)
        a = pluck_amplitudes(k, settings.get("excitation.position"), settings.get("excitation.width"))
        s0 = (HELD_VELOCITY / 127.0) ** 2 * a * (f < NYQUIST_MARGIN * self.fs)
        self.finish()
        self.current = Segment(block_index, modes, 2 * np.pi * f, decay_rate_per_s(f, b1, b3), s0 + 0j)

    def end(self, engine, block_index: int) -> None:
        """Last check of the current segment after block ``block_index``; later checks skip it."""
        if self.current is not None:
            self.check(engine, block_index)
            self.current.ended = True

    @staticmethod
    def find_slot(engine) -> int:
        return held_voice(engine, HELD_NOTE, HELD_CHANNEL)

    def check(self, engine, block_index: int) -> None:
        """Compare the held voice after block ``block_index`` has been rendered."""
        seg = self.current
        if seg is None or seg.cut_short or seg.ended:
            return
        slot = self.find_slot(engine)
        if slot < 0 or modes_per_voice(engine) != seg.modes:
            seg.cut_short = True
            return
        s = voice_amplitudes(engine, slot)
        lam = -seg.sigma + 1j * seg.omega
        t_since_on = (block_index + 1 - seg.start_block) * self.block / self.fs
        live = np.abs(seg.s0) * np.exp(-seg.sigma * t_since_on) >= MEASURABLE
        if seg.ref_state is None:
            closed = seg.s0 * np.exp(lam * t_since_on)
            seg.initial_rel = float(np.max(np.abs(s[live] - closed[live]) / np.abs(closed[live])))
            seg.ref_block, seg.ref_state = block_index, s
            seg.last_block = block_index
            return
        n = block_index - seg.ref_block
        t = n * self.block / self.fs
        live &= seg.ref_state != 0
        ratio = s[live] / (seg.ref_state[live] * np.exp(lam[live] * t))
        phase, level = np.abs(np.angle(ratio)), np.abs(np.log(np.abs(ratio)))
        tol = drift_tolerance(seg.omega[live], t, n)
        worst = np.maximum(phase, level) / tol
        i = int(np.argmax(worst))
        if worst[i] > seg.worst_ratio:
            seg.worst_ratio = float(worst[i])
            seg.worst_detail = {"mode": int(np.flatnonzero(live)[i]) + 1, "phase_rad": float(phase[i]),
                                "level_ln": float(level[i]), "tolerance": float(tol[i]), "blocks": n}
        seg.max_phase_rad = max(seg.max_phase_rad, float(phase.max()))
        seg.max_level = max(seg.max_level, float(level.max()))
        seg.level_db_now = float(20 * np.log10(abs(s[0]) / abs(seg.s0[0])))
        seg.last_block = block_index
        seg.checks += 1

