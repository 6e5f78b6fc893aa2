"""What a pickup hears of each string mode.

A pickup centred at x over an aperture of width w averages the mode shape
sin(k pi x) over the aperture, which gives sin(k pi x) sinc(k pi w / 2). A magnetic
pickup senses string velocity (its EMF follows dy/dt), so mode k is further
weighted by its angular frequency; a displacement sensor (optical, capacitive) is
not.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
from numpy.typing import ArrayLike


def aperture_weights(k: np.ndarray, position: float, width: float = 0.0) -> np.ndarray:
    """sin(k pi x) sinc(k pi w / 2): the spatial weight of mode k for one pickup."""
    spatial = mode_shape(k, position)
    if width > 0:
        spatial *= aperture_sinc(k, width)
    return spatial


def mode_shape(k: np.ndarray, position: float) -> np.ndarray:
    """sin(k pi x): mode k's shape at the point x (a fraction of the string from the bridge)."""
    return np.sin(np.asarray(k, dtype=float) * (np.pi * float(position)))


def aperture_sinc(k: np.ndarray, width: float) -> np.ndarray:
    """sinc(k pi w / 2) = sin(u) / u: the mode shape averaged over an aperture of width w.

    Written out because np.sinc makes several temporaries; u = 0 has the limit 1.
    """
    u = np.asarray(k, dtype=float) * (np.pi * float(width) / 2.0)
    return np.divide(np.sin(u), u, out=np.ones_like(u), where=u != 0)


def first_aperture_null(width: float) -> float:
    """Harmonic number (possibly fractional) of the first null of a uniform aperture.

    sinc(k pi w / 2) first vanishes at k pi w / 2 = pi, i.e. k = 2 / w.
    """
    return 2.0 / float(width)


def level_gain(level_db: float, polarity: int) -> float:
    """Linear gain of a pickup from its level in dB and its polarity (+1 or -1)."""
    # typeshed types float ** float as Any (a negative base gives a complex), hence the annotation.
    gain: float = 10.0 ** (float(level_db) / 20.0)
    return float(polarity) * gain


def spatial_sums(k: np.ndarray, pickups: Iterable[Mapping[str, Any]]) -> tuple[np.ndarray, np.ndarray]:
    """Level-weighted aperture weights summed over pickups, split by sensing.

    Returns (displacement_sum, velocity_sum), each one value per harmonic in ``k``.
    Each pickup is a mapping with ``position``, ``width``, ``sensing``, ``level_db``
    and ``polarity``.
    """
    k = np.asarray(k, dtype=float)
    disp = np.zeros(k.shape)
    vel = np.zeros(k.shape)
    for p in pickups:
        w = level_gain(p["level_db"], p["polarity"]) * aperture_weights(k, p["position"], p["width"])
        if p["sensing"] == "velocity":
            vel += w
        elif p["sensing"] == "displacement":
            disp += w
        else:
            raise ValueError(f"unknown pickup sensing {p['sensing']!r}")
    return disp, vel


def velocity_factor(sigma_per_s: ArrayLike, omega_rad_s: ArrayLike, omega_ref_rad_s: float | np.ndarray) -> np.ndarray:
    """(-sigma + i w) / w_ref: what a velocity pickup multiplies a mode's complex amplitude by.

    A mode with complex amplitude c moves as Re(c e^{(-sigma + i w) t}), so its velocity
    is Re(c (-sigma + i w) e^{...}); dividing by ``omega_ref_rad_s`` (the note's
    fundamental) keeps levels comparable across the keyboard while the ratios between
    harmonics stay the physical ones.
    """
    return (-np.asarray(sigma_per_s) + 1j * np.asarray(omega_rad_s)) / omega_ref_rad_s


def pickup_weights(
    k: np.ndarray,
    pickups: Iterable[Mapping[str, Any]],
    sigma_per_s: np.ndarray,
    omega_rad_s: np.ndarray,
    omega_ref_rad_s: float,
) -> np.ndarray:
    """Complex weight of each mode's complex amplitude in the summed pickup signal:
    displacement pickups by their spatial weight, velocity pickups by it times
    :func:`velocity_factor`."""
    disp, vel = spatial_sums(k, pickups)
    weights: np.ndarray = disp + vel * velocity_factor(sigma_per_s, omega_rad_s, omega_ref_rad_s)
    return weights
