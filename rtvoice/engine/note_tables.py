"""The power tables of unbent notes, kept for the next time the same note needs them.

Starting a voice, or changing its decay (release, fade), rebuilds its modes' power
tables and the output filter's resolvents and gains (:meth:`VoicePool.update_tables_at`
and ``Engine._resolve``): a few dozen array operations, the costliest part of a note-on.
For a voice without pitch bend they depend only on its note and on which decay it is
in (and on the settings it started with), so they are kept here by (note, decay,
epoch) and copied on the next use (a few array copies, whatever the count). The
epoch counts the changes of a setting they depend on (string, tuning, electronics:
the engine clears the store, and a voice keeps the epoch it started in, so one
started before a change never shares tables with one started after); the oldest
entry makes room when the store is full.
"""

from __future__ import annotations

from enum import IntEnum

import numpy as np

from rtvoice.engine.voices import VoicePool


class Decay(IntEnum):
    """Which decay rate a voice's modes follow (kept in the pool's int8 ``decay`` array, and in table keys)."""

    HOLD = 0  # the string's own loss law
    RELEASE = 1  # the release rate (key up)
    FADE = 2  # the fade's (from the held rate)
    FADE_AFTER_RELEASE = 3  # the fade's, or the release's where faster


DECAY_HOLD, DECAY_RELEASE, DECAY_FADE, DECAY_FADE_AFTER_RELEASE = Decay

FEW = 4  # up to this many slots are copied one by one (measured: faster than a gather)
_ROWS = ("A_rows", "p", "logp", "p_block", "p_block64", "h", "r")  # per-slot rows of the pool (slot is axis 0)


def faded(decay: int) -> Decay:
    """The decay of a voice in ``decay`` once it is faded (from the held or the released rate)."""
    return DECAY_FADE_AFTER_RELEASE if decay in (DECAY_RELEASE, DECAY_FADE_AFTER_RELEASE) else DECAY_FADE


class NoteTables:
    """Room for ``entries`` notes' tables of ``pool``'s shape; the oldest is overwritten when full (0: keep none)."""

    def __init__(self, pool: VoicePool, entries: int):
        self.entries = entries
        self._rows = {name: np.zeros((entries,) + getattr(pool, name).shape[1:], getattr(pool, name).dtype)
                      for name in _ROWS}
        self._b = np.zeros((pool.B_t.shape[0], entries, pool.modes), pool.B_t.dtype)
        for arr in (*self._rows.values(), self._b):  # written now, so first use takes no page faults
            arr.fill(0)
        self._where: dict[tuple[int, int, int], int] = {}
        self._key_of: list[tuple[int, int, int] | None] = [None] * entries
        self._next = 0
        self.epoch = 0
        self.hits = self.misses = 0

    def with_room(self, pool: VoicePool, entries: int) -> NoteTables:
        """This store if it has room for ``entries``, else a larger empty one that carries on its epoch
        (voices still ringing keep their epoch's tables apart from the new ones)."""
        if entries <= self.entries or not self.entries:  # a store told to keep nothing stays so
            return self
        larger = NoteTables(pool, entries)
        larger.epoch = self.epoch
        return larger

    def clear(self) -> None:
        """Forget every entry; voices started from now on belong to a new epoch."""
        self._where.clear()
        self._key_of = [None] * self.entries
        self.epoch += 1

    def find(self, keys: list[tuple[int, int, int] | None]) -> np.ndarray:
        """Entry of each key, -1 where it is not kept (or the key is None)."""
        where = self._where
        found = np.array([where.get(k, -1) if k is not None else -1 for k in keys], np.int64)
        hit = int(np.count_nonzero(found >= 0))
        self.hits += hit
        self.misses += len(keys) - hit
        return found

    def load(self, pool: VoicePool, slots: np.ndarray, entries: np.ndarray) -> None:
        """Copy kept tables into the pool's ``slots``."""
        if len(slots) <= FEW:  # row by row: a plain index copies without the gather's temporary
            for v, e in zip(slots.tolist(), entries.tolist(), strict=True):
                for name, rows in self._rows.items():
                    getattr(pool, name)[v] = rows[e]
                pool.B_t[:, v] = self._b[:, e]
            return
        for name, rows in self._rows.items():
            getattr(pool, name)[slots] = rows[entries]
        pool.B_t[:, slots] = self._b[:, entries]

    def save(self, pool: VoicePool, slots: np.ndarray, keys: list[tuple[int, int, int]]) -> None:
        """Keep the tables of the pool's ``slots`` under ``keys`` (distinct keys, none kept yet)."""
        if not self.entries:
            return
        entries = np.empty(len(keys), np.int64)
        for i, key in enumerate(keys):
            e = self._next
            self._next = (e + 1) % self.entries
            old = self._key_of[e]
            if old is not None:
                del self._where[old]
            self._key_of[e] = key
            self._where[key] = e
            entries[i] = e
        for name, rows in self._rows.items():
            rows[entries] = getattr(pool, name)[slots]
        self._b[:, entries] = pool.B_t[:, slots]
