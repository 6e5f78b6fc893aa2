"""The pickups' summed spatial weights, recomputed only where a pickup changed.

While a controller moves one pickup, the engine needs new weights every block.
:func:`rtvoice.physics.pickup.spatial_sums` recomputes every pickup from scratch;
this keeps each pickup's mode shape, aperture factor and level apart, so moving
one pickup costs one sine per mode and the others cost nothing. The result is
the same sum (checked against ``spatial_sums`` in the tests).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from rtvoice.physics.pickup import aperture_sinc, level_gain

SENSINGS = ("displacement", "velocity")


class _OnePickup:
    """Cached factors of one pickup: shape sin(k pi x), and the aperture sinc times the signed level."""

    def __init__(self, k: np.ndarray):
        self.k = k
        self.position = self.width = self.level_db = self.polarity = None
        self.shape = np.zeros(k.shape)
        self.scaled_sinc = np.ones(k.shape)
        self.weight = np.zeros(k.shape)

    def update(self, pickup: Mapping[str, Any]) -> bool:
        """Bring the cache up to ``pickup``; True when its weight changed."""
        position, width = pickup["position"], pickup["width"]
        level_db, polarity = pickup["level_db"], pickup["polarity"]
        changed = False
        if position != self.position:
            np.multiply(self.k, np.pi * float(position), out=self.shape)  # mode_shape, in place
            np.sin(self.shape, out=self.shape)
            self.position, changed = position, True
        if width != self.width or level_db != self.level_db or polarity != self.polarity:
            sinc = aperture_sinc(self.k, width) if width > 0 else 1.0
            np.multiply(sinc, level_gain(level_db, polarity), out=self.scaled_sinc)
            self.width, self.level_db, self.polarity, changed = width, level_db, polarity, True
        if changed:
            np.multiply(self.shape, self.scaled_sinc, out=self.weight)
        return changed


class PickupSums:
    """(displacement_sum, velocity_sum) per mode k = 1..modes for a list of pickups.

    The returned arrays are this object's own and change on the next :meth:`update`.
    """

    def __init__(self, modes: int):
        self.k = np.arange(1, modes + 1, dtype=float)
        self.disp = np.zeros(modes)
        self.vel = np.zeros(modes)
        self._cache: list[_OnePickup] = []
        self._sensing: list[str] = []

    def update(self, pickups: Sequence[Mapping[str, Any]]) -> tuple[np.ndarray, np.ndarray]:
        """Sums for ``pickups`` (mappings with position, width, level_db, polarity, sensing)."""
        sensing = [p["sensing"] for p in pickups]
        changed = sensing != self._sensing
        if changed:
            for name in sensing:
                if name not in SENSINGS:
                    raise ValueError(f"unknown pickup sensing {name!r}")
            self._cache = [_OnePickup(self.k) for _ in pickups]
            self._sensing = sensing
        moved = {name for cache, p, name in zip(self._cache, pickups, sensing, strict=True) if cache.update(p)}
        for name, total in (("displacement", self.disp), ("velocity", self.vel)):
            if changed or name in moved:
                group = [c.weight for c, s in zip(self._cache, sensing, strict=True) if s == name]
                if group:
                    np.copyto(total, group[0])
                    for w in group[1:]:
                        total += w
                else:
                    total[:] = 0.0
        return self.disp, self.vel
