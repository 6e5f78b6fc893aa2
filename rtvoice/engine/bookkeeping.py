"""Which slots need what before the next block product: the voice renderer's bookkeeping.

Three marks per slot, each a boolean array with the list of marked slots beside it (so
clearing them costs as many steps as there are marks, not slots):

- *touched*: rendered on the exact per-voice path this block (an event moved it), from
  sample ``upto[v]`` on; the block product leaves it out.
- *stale*: its block coefficients C = B^T (g s) no longer follow from last block's by the
  advance p^N (new amplitudes, weights or tables): work them out afresh before the product.
  ``all_stale`` asks for every slot at once (after a new packing, a resync, a silent block).
- *tables*: its decay or frequencies changed: rebuild its power tables before they are read.
"""

from __future__ import annotations

import numpy as np


class SlotMarks:
    """The three marks for ``slots`` slots."""

    def __init__(self, slots: int):
        self.touched = np.zeros(slots, bool)
        self.touched_list: list[int] = []
        self.upto = np.zeros(slots, np.int64)  # a touched slot's samples rendered so far this block
        self._stale = np.zeros(slots, bool)
        self.stale_list: list[int] = []
        self.all_stale = True
        self._tables = np.zeros(slots, bool)
        self.tables_list: list[int] = []

    def touch(self, v: int, fresh_at: int | None = None) -> None:
        """Put slot v on the exact path for this block (from sample ``fresh_at`` for a new voice)."""
        if not self.touched[v]:
            self.touched[v] = True
            self.upto[v] = 0 if fresh_at is None else fresh_at
            self.touched_list.append(v)

    def untouch_unmoved(self) -> None:
        """Take off the exact path every touched slot that has rendered nothing yet (changed only at
        sample 0): the block product renders it as well."""
        touched = self.touched_list
        if any(self.upto[v] == 0 for v in touched):
            for v in [v for v in touched if self.upto[v] == 0]:
                self.touched[v] = False
            touched[:] = [v for v in touched if self.touched[v]]

    def clear_touched(self) -> None:
        for v in self.touched_list:
            self.touched[v] = False
        self.touched_list.clear()

    def mark_stale(self, v: int) -> None:
        """Slot v's block coefficients no longer follow from its last ones: work them out next block."""
        if not self._stale[v]:
            self._stale[v] = True
            self.stale_list.append(v)

    def clear_stale(self) -> None:
        for v in self.stale_list:
            self._stale[v] = False
        self.stale_list.clear()

    def mark_tables(self, v: int) -> None:
        """Slot v's sigma or omega changed: rebuild its tables before they are next read (the
        rebuilds of a block are done together, one vectorised call for a whole chord)."""
        if not self._tables[v]:
            self._tables[v] = True
            self.tables_list.append(v)

    def clear_tables(self) -> None:
        self._tables[self.tables_list] = False
        self.tables_list.clear()
