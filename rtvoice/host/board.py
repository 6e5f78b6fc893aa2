"""Shared memory for what the UI shows: meters, mode levels, output spectrum, and on a fretted
instrument where the loudest voice and every string sound.

The engine process writes, the UI process reads; neither waits for the other.
A sequence counter (a seqlock) makes the reader's copy consistent: the writer
makes it odd while writing and even when done, and a reader keeps a copy only
when the counter was even and unchanged across its copy.
"""

from __future__ import annotations

import time
from multiprocessing import shared_memory

import numpy as np

from rtvoice.engine import MAX_STRINGS

MAX_MODES = 128
SPECTRUM_BINS = 1024
SILENT_DB = -120.0

#: Per string (string 1 first, room for the most strings an instrument has): the fret its sounding
#: voice plays (-1: silent) and that voice's level bound in dB re full scale (SILENT_DB when silent).
STRING_FRET_FIELDS = tuple(f"string_{n}_fret" for n in range(1, MAX_STRINGS + 1))
STRING_LEVEL_FIELDS = tuple(f"string_{n}_level_db" for n in range(1, MAX_STRINGS + 1))
# Scalar fields, in order, after the sequence counter.
FIELDS: tuple[str, ...] = (
    "voices", "load_median", "load_p99", "xruns", "peak_dbfs", "gain_reduction_db",
    "midi_events", "note", "f0_hz", "n_modes", "spectrum_bin_hz", "heartbeat_s", "blocks",
    "sample_rate_hz", "block_frames", "velocity", "notes_dropped", "late",
    "string", "fret",  # the loudest voice's string (1 = highest) and fret; 0 and -1 under the open rule
    *STRING_FRET_FIELDS, *STRING_LEVEL_FIELDS,
)
_N_FIELDS = len(FIELDS)
_OFFSETS = {"fields": 8}
_OFFSETS["mode_levels"] = _OFFSETS["fields"] + 8 * _N_FIELDS
_OFFSETS["mode_freqs"] = _OFFSETS["mode_levels"] + 8 * MAX_MODES
_OFFSETS["spectrum"] = _OFFSETS["mode_freqs"] + 8 * MAX_MODES
SIZE_BYTES = _OFFSETS["spectrum"] + 8 * SPECTRUM_BINS


class Board:
    """A view of the shared block; ``create()`` in the UI process, ``attach(name)`` in the engine."""

    def __init__(self, shm: shared_memory.SharedMemory, owner: bool):
        self.shm, self.owner = shm, owner
        buf = shm.buf
        self._seq = np.ndarray((1,), np.uint64, buf, 0)
        self._fields = np.ndarray((_N_FIELDS,), np.float64, buf, _OFFSETS["fields"])
        self.mode_levels_db = np.ndarray((MAX_MODES,), np.float64, buf, _OFFSETS["mode_levels"])
        self.mode_freqs_hz = np.ndarray((MAX_MODES,), np.float64, buf, _OFFSETS["mode_freqs"])
        self.spectrum_db = np.ndarray((SPECTRUM_BINS,), np.float64, buf, _OFFSETS["spectrum"])
        self._index = {name: i for i, name in enumerate(FIELDS)}
        self._last: tuple[dict, np.ndarray, np.ndarray, np.ndarray] | None = None

    @classmethod
    def create(cls) -> Board:
        board = cls(shared_memory.SharedMemory(create=True, size=SIZE_BYTES), owner=True)
        fields, levels, freqs, spectrum = _initial_state()
        board._fields[:] = [fields[n] for n in FIELDS]
        board.mode_levels_db[:] = levels
        board.mode_freqs_hz[:] = freqs
        board.spectrum_db[:] = spectrum
        return board

    @classmethod
    def attach(cls, name: str) -> Board:
        # A 'spawn' child shares its parent's resource tracker, which already knows this
        # block: the creating process alone unlinks it (in close()).
        return cls(shared_memory.SharedMemory(name=name), owner=False)

    @property
    def name(self) -> str:
        return self.shm.name

    # -- writer (engine process) ------------------------------------------------------
    def begin(self) -> None:
        self._seq[0] += np.uint64(1)

    def end(self) -> None:
        self._seq[0] += np.uint64(1)

    def put(self, name: str, value: float) -> None:
        self._fields[self._index[name]] = value

    # -- reader (UI process) ------------------------------------------------------------
    def read(self, tries: int = 8) -> tuple[dict, np.ndarray, np.ndarray, np.ndarray]:
        """(fields, mode levels dB, mode freqs Hz, spectrum dB): a consistent copy, never waiting.

        A try that meets the writer at work yields the processor once and tries again; when
        every try does, the previous consistent copy is returned.
        """
        for attempt in range(tries):
            if attempt:
                time.sleep(0)  # let a writer in this process (tests) finish its update
            s1 = int(self._seq[0])
            if s1 % 2:
                continue
            fields = self._fields.copy()
            levels, freqs, spec = self.mode_levels_db.copy(), self.mode_freqs_hz.copy(), self.spectrum_db.copy()
            if int(self._seq[0]) == s1:
                self._last = (dict(zip(FIELDS, fields.tolist(), strict=True)), levels, freqs, spec)
                return self._last
        if self._last is None:  # nothing consistent seen yet: the state before any update
            return _initial_state()
        return self._last

    def close(self) -> None:
        # Drop the numpy views first: the mapping cannot close while they export the buffer.
        del self._seq, self._fields, self.mode_levels_db, self.mode_freqs_hz, self.spectrum_db
        try:
            self.shm.close()
        except BufferError:
            return
        if self.owner:
            try:
                self.shm.unlink()
            except FileNotFoundError:
                pass


def _initial_state() -> tuple[dict, np.ndarray, np.ndarray, np.ndarray]:
    """What the board holds before the engine's first update: silence, no note."""
    fields = dict.fromkeys(FIELDS, 0.0)
    fields.update(note=-1.0, peak_dbfs=SILENT_DB, fret=-1.0)
    fields.update(dict.fromkeys(STRING_FRET_FIELDS, -1.0))
    fields.update(dict.fromkeys(STRING_LEVEL_FIELDS, SILENT_DB))
    return fields, np.full(MAX_MODES, SILENT_DB), np.zeros(MAX_MODES), np.full(SPECTRUM_BINS, SILENT_DB)
