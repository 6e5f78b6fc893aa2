"""Meters of the engine process: callback load, the loudest voice's modes (and on a fretted
instrument its string and fret, and the fret and level of every sounding string), the output spectrum.

The callback side (``add``, ``stage``) writes into preallocated arrays only; the
main thread reads them at its own pace and publishes to the shared board.
"""

from __future__ import annotations

import math
from typing import TypedDict

import numpy as np

from rtvoice.engine import MAX_STRINGS, Engine, VoiceReadout, loudest_voice_into, sounding_places_into
from rtvoice.host.board import (
    MAX_MODES,
    SILENT_DB,
    SPECTRUM_BINS,
    STRING_FRET_FIELDS,
    STRING_LEVEL_FIELDS,
    Board,
)
from rtvoice.host.ring import SampleRing

LOAD_WINDOW_S = 5.0  # the live meter's median and p99 cover this much of the recent past
LOAD_HIST_BINS = 4000  # whole-run histogram of callback load, 0.1 % steps up to 400 %
SPECTRUM_FRAMES = 2 * SPECTRUM_BINS
FLOOR = 1e-6  # -120 dB


def median_p99(x: np.ndarray) -> tuple[float, float]:
    """Median and 99th percentile (nearest rank) by partial sorting, cheaper than a full sort."""
    n = x.shape[0]
    if n == 0:
        return 0.0, 0.0
    i50, i99 = (n - 1) // 2, min(n - 1, math.ceil(0.99 * n) - 1)
    part = np.partition(x, (i50, i99))
    return float(part[i50]), float(part[i99])


class CallbackMeter:
    """Callback time as a share of the block period: a recent window and a whole-run histogram."""

    def __init__(self, period_s: float, window_s: float = LOAD_WINDOW_S):
        self.period_s = period_s
        self._window = np.zeros(max(16, math.ceil(window_s / period_s)))
        self._count = 0
        self._hist = np.zeros(LOAD_HIST_BINS, np.int64)

    def add(self, seconds: float) -> None:
        """Record one callback (callback side)."""
        share = seconds / self.period_s
        self._window[self._count % self._window.shape[0]] = share
        self._count += 1
        self._hist[min(int(share * 1000), LOAD_HIST_BINS - 1)] += 1

    def recent(self) -> tuple[float, float]:
        """(median, p99) over the recent window."""
        return median_p99(self._window[:min(self._count, self._window.shape[0])])

    def histogram_pairs(self) -> list[list[int]]:
        """The whole run's histogram as [bin, count] pairs of its non-empty 0.1 % bins (so runs can be merged)."""
        nz = np.flatnonzero(self._hist)
        return [[int(b), int(self._hist[b])] for b in nz]

    def run_percentile(self, q: float) -> float:
        """The q-quantile (0..1) over the whole run, to the histogram's 0.1 % resolution."""
        total = int(self._hist.sum())
        if not total:
            return 0.0
        return (float(np.searchsorted(np.cumsum(self._hist), q * total)) + 0.5) / 1000


class StagedVoice(TypedDict):
    """One half of :class:`VoiceStage`: |g s| in output units and frequency in Hz of the loudest
    voice's first ``n`` modes, its note and velocity, and how many voices sound; on a fretted
    instrument its ``string`` and ``fret`` (0 and -1 under the open rule), and per string (string 1
    first) the fret sounding there (``string_frets``, -1: silent) and that voice's level bound in
    output units (``string_levels``)."""

    levels: np.ndarray
    freqs: np.ndarray
    n: int
    note: int
    velocity: int
    voices: int
    string: int
    fret: int
    string_frets: np.ndarray
    string_levels: np.ndarray


class VoiceStage:
    """The loudest voice's mode levels and frequencies, double-buffered for the main thread."""

    def __init__(self) -> None:
        self._halves: list[StagedVoice] = [
            {"levels": np.zeros(MAX_MODES), "freqs": np.zeros(MAX_MODES), "n": 0, "note": -1, "velocity": 0,
             "voices": 0, "string": 0, "fret": -1, "string_frets": np.full(MAX_STRINGS, -1, np.int64),
             "string_levels": np.zeros(MAX_STRINGS)} for _ in range(2)]
        self._ready = 0
        self._work = np.zeros(MAX_MODES, complex)  # scratch for the engine's read-out
        self._readout = VoiceReadout()

    def stage(self, engine: Engine, host_gain: float) -> None:
        """Copy the loudest voice's |g s| per mode in output units, and where the strings sound
        (callback side: into the halves' own arrays, nothing allocated)."""
        half = self._halves[1 - self._ready]
        gain = 10 ** (engine.settings.get("output.gain_db") / 20) * host_gain
        r = loudest_voice_into(engine, half["levels"], half["freqs"], self._work, gain, self._readout)
        half["n"], half["note"], half["velocity"], half["voices"] = r.modes, r.note, r.velocity, r.voices
        half["string"], half["fret"] = r.string, r.fret
        levels = half["string_levels"]
        sounding_places_into(engine, half["string_frets"], levels)
        np.multiply(levels, gain, out=levels)  # in output units, as the mode levels are
        self._ready = 1 - self._ready

    def current(self) -> StagedVoice:
        return self._halves[self._ready]


class Publisher:
    """Writes one update of meters, mode levels and the output spectrum to the board (main thread)."""

    def __init__(self, board: Board, ring: SampleRing, sample_rate_hz: int):
        self.board, self.ring, self.rate = board, ring, sample_rate_hz
        self._frames = np.zeros(SPECTRUM_FRAMES, np.float32)
        self._window = np.hanning(SPECTRUM_FRAMES)
        self._norm = 2.0 / self._window.sum()  # a full-scale sine reads 0 dB

    def publish(self, fields: dict, stage: StagedVoice, n_modes: int) -> None:
        n = stage["n"]
        levels = np.full(MAX_MODES, SILENT_DB)
        if n:
            levels[:n] = 20 * np.log10(np.maximum(stage["levels"][:n], FLOOR))
        self.ring.latest(self._frames)
        spectrum = np.abs(np.fft.rfft(self._frames * self._window))[:SPECTRUM_BINS] * self._norm
        spectrum_db = 20 * np.log10(np.maximum(spectrum, FLOOR))
        peak = fields.pop("peak", 0.0)
        board = self.board
        board.begin()
        try:
            for name, value in fields.items():
                board.put(name, value)
            board.put("peak_dbfs", 20 * math.log10(peak) if peak > FLOOR else SILENT_DB)
            board.put("voices", stage["voices"])
            board.put("note", stage["note"])
            board.put("velocity", stage["velocity"])
            board.put("f0_hz", float(stage["freqs"][0]) if n else 0.0)
            board.put("n_modes", min(n_modes, MAX_MODES))
            board.put("spectrum_bin_hz", self.rate / SPECTRUM_FRAMES)
            board.put("sample_rate_hz", self.rate)
            board.put("string", stage["string"])
            board.put("fret", stage["fret"])
            frets = stage["string_frets"]
            string_db = 20 * np.log10(np.maximum(stage["string_levels"], FLOOR))
            for i, (fret_name, level_name) in enumerate(zip(STRING_FRET_FIELDS, STRING_LEVEL_FIELDS, strict=True)):
                board.put(fret_name, int(frets[i]))
                board.put(level_name, float(string_db[i]) if frets[i] >= 0 else SILENT_DB)
            board.mode_levels_db[:] = levels
            board.mode_freqs_hz[:] = stage["freqs"] if n else 0.0
            board.spectrum_db[:] = spectrum_db
        finally:
            board.end()
