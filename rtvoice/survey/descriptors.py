"""Tonal descriptors from the energy of each harmonic over a listening window.

A mode of amplitude |A| decaying at sigma carries E = |A|^2 (1 - exp(-2 sigma T)) / (2 sigma)
between the attack (t = 0) and T: the integral of its squared envelope. The mean
square of the tone is half that; the factor is the same for every mode and cancels
in every descriptor. The same functions serve the analytic map and the energies
measured from rendered audio, so the two are compared like for like.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DEFAULT_MISSING_BELOW_DB = 40.0
#: Energies this far (200 dB) below a point's strongest harmonic are rounding error of a
#: vanishing sine (sin(k pi p) at k p whole): they count as zero.
ROUNDING_FLOOR = 1e-20


def window_factor(sigma_per_s: np.ndarray, window_s: float) -> np.ndarray:
    """(1 - exp(-2 sigma T)) / (2 sigma) in seconds; T for a mode that does not decay."""
    two_sigma = 2.0 * np.asarray(sigma_per_s, dtype=float)
    safe = np.where(two_sigma > 0, two_sigma, 1.0)
    return np.where(two_sigma > 0, -np.expm1(-two_sigma * window_s) / safe, window_s)


@dataclass(frozen=True)
class Descriptors:
    """Descriptors of one or many points; arrays have the energies' shape without the last axis."""

    centroid_hz: np.ndarray
    centroid_ratio: np.ndarray  # centroid / f1
    odd_even_db: np.ndarray
    total_energy: np.ndarray  # sum over harmonics, output units^2 x s
    missing: np.ndarray  # bool, one per harmonic (last axis)


def _db_ratio(num: np.ndarray, den: np.ndarray | float) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10.0 * np.log10(num / den)


def describe(
    energy: np.ndarray, freqs_hz: np.ndarray, missing_below_db: float = DEFAULT_MISSING_BELOW_DB
) -> Descriptors:
    """Descriptors of ``energy`` (..., n_harmonics): harmonic k = 1.. last, at ``freqs_hz`` (one row
    for every point, or one row per point, shaped like ``energy``).

    centroid = sum f_k E_k / sum E_k; odd/even = 10 log10(sum of odd-k E / sum of even-k E)
    (+inf when no even harmonic sounds); a harmonic is missing when its energy is
    more than ``missing_below_db`` below the strongest harmonic of the same point.
    Energies under ROUNDING_FLOOR times the strongest count as zero.
    """
    energy = np.asarray(energy, dtype=float)
    strongest = energy.max(axis=-1, keepdims=True)
    energy = np.where(energy < strongest * ROUNDING_FLOOR, 0.0, energy)  # a sine's zero, not a tone
    freqs = np.asarray(freqs_hz, dtype=float)
    total = energy.sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        # One note's modes (1-D) or each point's own (the neck map: freqs shaped like energy).
        centroid = (energy @ freqs if freqs.ndim == 1 else np.sum(energy * freqs, axis=-1)) / total
    odd = energy[..., 0::2].sum(axis=-1)
    even = energy[..., 1::2].sum(axis=-1)
    floor = strongest * 10.0 ** (-missing_below_db / 10.0)
    return Descriptors(centroid, centroid / freqs[..., 0], _db_ratio(odd, even), total, energy < floor)


def level_db(total_energy: np.ndarray, reference_energy: float) -> np.ndarray:
    """10 log10 of a total energy relative to the reference placement's."""
    return _db_ratio(np.asarray(total_energy, dtype=float), np.float64(reference_energy))


def harmonic_db(energy: np.ndarray, reference_energy: float | None = None) -> np.ndarray:
    """10 log10 of each harmonic's energy re ``reference_energy`` (default: the strongest)."""
    energy = np.asarray(energy, dtype=float)
    ref = energy.max() if reference_energy is None else reference_energy
    return _db_ratio(energy, np.float64(ref))
