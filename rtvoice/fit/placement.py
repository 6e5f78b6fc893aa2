"""The pluck and pickup distances, the aperture and the pickup's resonance, read from partial levels.

A plucked note's partial k has an onset level proportional to |sin(k pi p) sin(k pi q)| (the pluck's
sine-series projection times the pickup's mode shape, p and q fractions of the speaking length)
times sincs over the contact and the aperture, times a smooth envelope: the pluck's 1/k^2, the
sensing, the coil's low-pass and whatever tone filter the recording went through
(:mod:`rtvoice.fit.comb`). :func:`fit_placement` finds p and q for one take,
:func:`fit_placement_group` for several takes of one string plucked at different places (the
distance common to all is the pickup's). The comb is symmetric in p and q, so one take alone cannot
say which distance is the pluck: the result says how the two were assigned (:class:`Assignment`)
and why. |sin(k pi x)| = |sin(k pi (1 - x))| for whole k, so each distance is read on the saddle's half
of the stopped string: a place past the middle reads as its mirror image L - x (a pickup given, or
shared by takes at other frets, may lie anywhere). :func:`pickup_level_ratio` and
:func:`pluck_level_ratio` give the per-partial change of moving either, for moving them on a recording.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from enum import StrEnum

import numpy as np

from rtvoice.errors import UserError
from rtvoice.fit import placement_search as search
from rtvoice.fit.comb import Levels, Sensing, known_envelope_db, log_frequency_basis, pluck_amplitude_ratio
from rtvoice.fit.placement_solve import Estimate, estimate
from rtvoice.physics.pickup import aperture_weights

MIN_PARTIALS = 6
LEVEL_SD_FLOOR_DB = 0.5
DEFAULT_MAX_GAIN_DB = 40.0  # a moved partial changes by at most this much: a null carries only noise


class PlacementError(UserError):
    """Partial levels the placement cannot be read from (too few usable partials, bad arrays)."""


class Assignment(StrEnum):
    """How the two distances the comb leaves were told apart."""

    GIVEN = "given"  # the user gave the pickup's distance
    SHARED = "shared"  # the distance common to several takes is the pickup's
    GUESS = "guess"  # one take: the two are interchangeable, the assignment is a guess


@dataclass(frozen=True)
class PartialLevels:
    """One take's partials: mode number ``k`` (1 = fundamental), frequency in Hz, onset level (linear
    amplitude, any scale) and least-squares weight (e.g. 1 / variance of the level in dB; 0 = unusable)."""

    k: np.ndarray
    freq_hz: np.ndarray
    level: np.ndarray
    weight: np.ndarray

    @classmethod
    def from_db(cls, k: np.ndarray, freq_hz: np.ndarray, level_db: np.ndarray, weight: np.ndarray) -> PartialLevels:
        return cls(np.asarray(k), np.asarray(freq_hz), 10.0 ** (np.asarray(level_db, dtype=float) / 20.0),
                   np.asarray(weight))


@dataclass(frozen=True)
class PlacementFit:
    """Where one take was plucked and sensed. Distances in mm from the saddle, fractions of the
    speaking length, each with its standard deviation; ``aperture_mm``, ``resonance_hz`` and ``q``
    are None where the partials cannot tell them (``notes`` says why). ``over_pickup`` flags a pluck
    within reach of the pickup's distance: the comb is then nearly sin^2 and the two are poorly
    separated (their sds say how poorly)."""

    pluck_fraction: float
    pickup_fraction: float
    pluck_mm: float
    pickup_mm: float
    pluck_sd_mm: float
    pickup_sd_mm: float
    speaking_length_mm: float
    assignment: Assignment
    why: str
    aperture_mm: float | None
    aperture_sd_mm: float | None
    resonance_hz: float | None
    resonance_sd_hz: float | None
    q: float | None
    q_sd: float | None
    residual_db_rms: float
    partials_used: int
    over_pickup: bool
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class GroupPlacementFit:
    """Several takes of one string: the pickup's distance common to all, each take's pluck (in the
    order of the takes), the shared aperture and resonance, and each take's own :class:`PlacementFit`."""

    pickup_mm: float
    pickup_sd_mm: float
    pluck_mm: tuple[float, ...]
    pluck_sd_mm: tuple[float, ...]
    takes: tuple[PlacementFit, ...]
    assignment: Assignment
    why: str
    aperture_mm: float | None
    aperture_sd_mm: float | None
    resonance_hz: float | None
    resonance_sd_hz: float | None
    q: float | None
    q_sd: float | None
    residual_db_rms: float
    notes: tuple[str, ...] = ()


def weights_from_level_sd(level: np.ndarray, level_sd: np.ndarray, floor_db: float = LEVEL_SD_FLOOR_DB) -> np.ndarray:
    """Least-squares weights 1 / sd^2 of levels in dB from linear levels and their sds (20 log10(1 + sd / level)
    is about 8.69 sd / level dB), every sd held at ``floor_db`` at least: no level is known better than the
    model that explains it."""
    level = np.asarray(level, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        sd_db = 20.0 / np.log(10.0) * np.asarray(level_sd, dtype=float) / level
    weight: np.ndarray = np.where(np.isfinite(sd_db) & (level > 0), 1.0 / (sd_db**2 + floor_db**2), 0.0)
    return weight


def _sensing(value: Sensing | str) -> Sensing:
    try:
        return Sensing(value)
    except ValueError:
        raise PlacementError("unknown pickup sensing", key="sensing", value=value,
                             allowed=", ".join(s.value for s in Sensing)) from None


def take_model(partials: PartialLevels, speaking_length_mm: float, sensing: Sensing,
               pluck_width_mm: float = 0.0) -> search.TakeModel:
    """A take's usable partials as the search's :class:`~rtvoice.fit.placement_search.TakeModel`."""
    arrays = [np.asarray(a, dtype=float).reshape(-1) for a in (partials.k, partials.freq_hz, partials.level,
                                                                partials.weight)]
    if len({a.size for a in arrays}) != 1:
        raise PlacementError("k, freq_hz, level and weight must be arrays of one length",
                             value=tuple(a.size for a in arrays))
    k, freq, level, weight = arrays
    if not (np.isfinite(speaking_length_mm) and speaking_length_mm > 4 * search.MIN_DISTANCE_MM):
        raise PlacementError("the speaking length must be a length in mm", key="speaking_length_mm",
                             value=speaking_length_mm)
    usable = (np.isfinite(k) & (k >= 1) & (np.round(k) == k) & np.isfinite(freq) & (freq > 0) & np.isfinite(level)
              & (level > 0) & np.isfinite(weight) & (weight > 0))
    if np.count_nonzero(usable) < MIN_PARTIALS:
        raise PlacementError(f"{np.count_nonzero(usable)} usable partials: the comb needs at least {MIN_PARTIALS}")
    order = np.argsort(k[usable])
    k, freq, level, weight = (a[usable][order] for a in (k, freq, level, weight))
    if np.any(np.diff(k) == 0):
        raise PlacementError("a mode number appears twice", key="k")
    levels = Levels(k, freq, 20.0 * np.log10(level), weight / weight.max())
    degree = 2 if k.size >= 24 else 1 if k.size >= 12 else 0  # the free envelope's flexibility
    return search.TakeModel(levels, float(speaking_length_mm), known_envelope_db(k, freq, sensing),
                            log_frequency_basis(freq, degree), float(pluck_width_mm))


def fit_placement(k: np.ndarray, freq_hz: np.ndarray, level: np.ndarray, weight: np.ndarray, *,
                  speaking_length_mm: float, sensing: Sensing | str, pickup_mm: float | None = None,
                  pluck_width_mm: float = 0.0, aperture_mm: float | None = None) -> PlacementFit:
    """The pluck and pickup distances of one take from its partial levels (see the module's note).

    ``level`` is each partial's onset amplitude (linear), ``weight`` its least-squares weight.
    With ``pickup_mm`` given the other distance is the pluck (:attr:`Assignment.GIVEN`); without it
    the nearer the saddle is taken as the pickup (:attr:`Assignment.GUESS`). ``aperture_mm`` None
    fits the aperture where the high partials show it; ``pluck_width_mm`` is the contact's width."""
    take = take_model(PartialLevels(k, freq_hz, level, weight), speaking_length_mm, _sensing(sensing),
                      pluck_width_mm)
    found = estimate([take], pickup_mm=pickup_mm, aperture_mm=aperture_mm)
    if pickup_mm is not None:
        return _take_fit(found, 0, take, Assignment.GIVEN,
                         f"the pickup's distance was given ({pickup_mm:.1f} mm); the other is the pluck")
    fit = _take_fit(found, 0, take, Assignment.GUESS,
                    "one take: sin(k pi p) sin(k pi q) is symmetric, so the two distances are interchangeable; "
                    "the one nearer the saddle is taken as the pickup")
    # Bridge and middle pickups sit nearer the saddle than where a player usually plucks (common
    # practice), so the nearer distance is called the pickup.
    return _swapped(fit) if fit.pluck_mm < fit.pickup_mm else fit


def fit_placement_group(takes: Sequence[PartialLevels], *, speaking_length_mm: float | Sequence[float],
                        sensing: Sensing | str, pickup_mm: float | None = None,
                        pluck_width_mm: float | Sequence[float] = 0.0,
                        aperture_mm: float | None = None) -> GroupPlacementFit:
    """Several takes of one string plucked at different places: the pickup is the distance common to all.

    ``speaking_length_mm`` and ``pluck_width_mm`` are one value or one per take (takes at different
    frets); the pickup's distance from the saddle is the same for all. With ``pickup_mm`` given the
    plucks are fitted to it (:attr:`Assignment.GIVEN`)."""
    if len(takes) < 1:
        raise PlacementError("no takes to fit")
    lengths = _per_take(speaking_length_mm, len(takes), "speaking_length_mm")
    widths = _per_take(pluck_width_mm, len(takes), "pluck_width_mm")
    sense = _sensing(sensing)
    models = [take_model(t, length, sense, width) for t, length, width in zip(takes, lengths, widths, strict=True)]
    found = estimate(models, pickup_mm=pickup_mm, aperture_mm=aperture_mm)
    if pickup_mm is not None:
        assignment, why = Assignment.GIVEN, f"the pickup's distance was given ({pickup_mm:.1f} mm)"
    elif len(models) == 1:
        assignment, why = Assignment.GUESS, "one take: the two distances are interchangeable"
    else:
        assignment = Assignment.SHARED
        why = (f"the distance common to the {len(models)} takes ({found.pickup_mm:.1f} mm) is the pickup's; "
               "each take's other distance is its pluck")
    fits = tuple(_take_fit(found, i, m, assignment, why) for i, m in enumerate(models))
    return GroupPlacementFit(
        pickup_mm=found.pickup_mm, pickup_sd_mm=found.pickup_sd_mm,
        pluck_mm=tuple(float(p) for p in found.plucks_mm), pluck_sd_mm=tuple(float(s) for s in found.plucks_sd_mm),
        takes=fits, assignment=assignment, why=why, aperture_mm=found.aperture_mm,
        aperture_sd_mm=found.aperture_sd_mm, resonance_hz=found.resonance_hz, resonance_sd_hz=found.resonance_sd_hz,
        q=found.q, q_sd=found.q_sd,
        residual_db_rms=float(np.sqrt(np.mean(found.residual_db_rms**2))), notes=found.notes)


def _take_fit(found: Estimate, i: int, take: search.TakeModel, assignment: Assignment, why: str) -> PlacementFit:
    """Take ``i``'s share of ``found``."""
    length = take.length_mm
    pluck, pickup = float(found.plucks_mm[i]), found.pickup_mm
    return PlacementFit(
        pluck_fraction=pluck / length, pickup_fraction=pickup / length, pluck_mm=pluck, pickup_mm=pickup,
        pluck_sd_mm=float(found.plucks_sd_mm[i]), pickup_sd_mm=found.pickup_sd_mm, speaking_length_mm=length,
        assignment=assignment, why=why, aperture_mm=found.aperture_mm, aperture_sd_mm=found.aperture_sd_mm,
        resonance_hz=found.resonance_hz, resonance_sd_hz=found.resonance_sd_hz, q=found.q, q_sd=found.q_sd,
        residual_db_rms=float(found.residual_db_rms[i]), partials_used=take.levels.count,
        over_pickup=bool(found.over_pickup[i]), notes=found.notes)


def _per_take(value: float | Sequence[float], count: int, name: str) -> list[float]:
    if isinstance(value, int | float):
        return [float(value)] * count
    values = [float(v) for v in value]
    if len(values) != count:
        raise PlacementError(f"one value per take ({count})", key=name, value=value)
    return values


def _swapped(fit: PlacementFit) -> PlacementFit:
    return replace(fit, pluck_fraction=fit.pickup_fraction, pickup_fraction=fit.pluck_fraction,
                   pluck_mm=fit.pickup_mm, pickup_mm=fit.pluck_mm, pluck_sd_mm=fit.pickup_sd_mm,
                   pickup_sd_mm=fit.pluck_sd_mm)


# -- moving a pickup or a pluck on a recording -------------------------------------------------------------


def _capped(ratio: np.ndarray, max_gain_db: float) -> np.ndarray:
    """``ratio`` with its magnitude held within +-``max_gain_db`` (sign kept; 0/0, a shared null, is 1).

    The cap is symmetric, so a move there and back still multiplies to exactly 1."""
    ratio = np.where(np.isnan(ratio), 1.0, ratio)
    cap = 10.0 ** (max_gain_db / 20.0)
    sign = np.where(ratio < 0, -1.0, 1.0)
    out: np.ndarray = sign * np.clip(np.abs(ratio), 1.0 / cap, cap)
    return out


def pickup_level_ratio(k: np.ndarray, from_mm: float, to_mm: float, speaking_length_mm: float,
                       aperture_mm: float = 0.0, max_gain_db: float = DEFAULT_MAX_GAIN_DB,
                       to_aperture_mm: float | None = None) -> np.ndarray:
    """Per-partial amplitude ratio (signed) of moving the pickup from ``from_mm`` to ``to_mm`` from the saddle:
    the engine's spatial weight (:func:`rtvoice.physics.pickup.aperture_weights`) at the new place over the old.
    The aperture's sinc cancels for the same pickup moved; ``to_aperture_mm`` puts a pickup of another width
    at the new place."""
    k = np.asarray(k, dtype=float)
    length = float(speaking_length_mm)
    width = float(aperture_mm) / length
    to_width = width if to_aperture_mm is None else float(to_aperture_mm) / length
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = aperture_weights(k, to_mm / length, to_width) / aperture_weights(k, from_mm / length, width)
    return _capped(ratio, max_gain_db)


def pluck_level_ratio(k: np.ndarray, from_mm: float, to_mm: float, speaking_length_mm: float,
                      pluck_width_mm: float = 0.0, max_gain_db: float = DEFAULT_MAX_GAIN_DB) -> np.ndarray:
    """Per-partial amplitude ratio (signed) of moving the pluck from ``from_mm`` to ``to_mm`` from the saddle:
    the engine's pluck coefficient (:func:`rtvoice.physics.excitation.pluck_amplitudes`, a triangle of
    unit height) at the new place over the old."""
    length = float(speaking_length_mm)
    ratio = pluck_amplitude_ratio(np.asarray(k, dtype=float), from_mm / length, to_mm / length,
                                  float(pluck_width_mm) / length)
    return _capped(ratio, max_gain_db)


__all__ = ["Assignment", "GroupPlacementFit", "PartialLevels", "PlacementError", "PlacementFit", "Sensing",
           "fit_placement", "fit_placement_group", "pickup_level_ratio", "pluck_level_ratio", "weights_from_level_sd"]
