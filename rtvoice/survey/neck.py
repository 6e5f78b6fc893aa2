"""The survey across the neck: one placement of the pluck and the pickups, every string x fret.

The pluck and the pickups stay where they are on the body while a fret shortens the string,
so one placement sits at a different fraction of every note: a point fixed at a fraction x
of the open scale lies at x 2^(n/12) of the note at fret n (12-TET fret rule, common
practice), and a slanted pickup lies nearer or further under each string. Each cell is the
note the engine plays at that string and fret (:func:`rtvoice.engine.note_model_at`: its
frequencies, decay rates and initial amplitudes) heard through the pickups where the engine
puts them (:meth:`rtvoice.engine.PlacedNote.pickup_on_note`), then through the same output
stage as the pickup x pluck grids. The arithmetic runs on (cells, modes) arrays at once.

A comparison maps a second placement (the same instrument with other settings) over the same
cells: both placements' descriptors, their differences, and which of the lowest harmonics
each placement loses against the other.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from rtvoice.engine import Settings, note_model_at
from rtvoice.survey.descriptors import DEFAULT_MISSING_BELOW_DB, ROUNDING_FLOOR, describe, window_factor
from rtvoice.survey.grid import DEFAULT_WINDOW_S
from rtvoice.survey.inputs import SurveyError
from rtvoice.survey.model import EngineModel
from rtvoice.survey.placing import fretted_settings, placed_at

DEFAULT_HARMONICS = 12  # the lost / gained lists look at this many of the lowest harmonics
DEFAULT_LOST_BY_DB = 30.0  # a harmonic this much weaker than at the other placement is lost


@dataclass(frozen=True)
class NeckMap:
    """Descriptors of one placement over strings (rows) x frets (columns).

    Arrays have shape (len(strings), len(frets)); ``energy`` and ``missing`` add one axis of
    ``string.modes`` harmonics (0 and False past a note's own playable count). ``level_db`` is
    relative to the open string of the same string at this placement.
    """

    settings: Settings
    strings: tuple[int, ...]
    frets: tuple[int, ...]
    pickup_index: int
    window_s: float
    sample_rate_hz: float
    missing_below_db: float
    notes: np.ndarray
    f1_hz: np.ndarray
    mode_counts: np.ndarray
    pickup_mm: np.ndarray  # (strings,): the surveyed pickup's centre under each string, mm from the saddle
    pickup_fraction: np.ndarray  # the same as a fraction of each note's speaking length
    pluck_fraction: np.ndarray  # the pluck as a fraction of each note's speaking length
    energy: np.ndarray  # each harmonic's energy over the listening window, output units^2 x s
    open_energy: np.ndarray  # (strings,): total energy of each string's open note at this placement
    centroid_hz: np.ndarray
    centroid_ratio: np.ndarray
    odd_even_db: np.ndarray
    electronics_db: np.ndarray
    centroid_bare_hz: np.ndarray
    missing: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.strings), len(self.frets)

    @property
    def total_energy(self) -> np.ndarray:
        total: np.ndarray = self.energy.sum(axis=-1)
        return total

    @property
    def level_db(self) -> np.ndarray:
        """10 log10 of each note's energy over its string's open note's, at this placement."""
        return _db(self.total_energy, self.open_energy[:, None])

    def value(self, name: str) -> np.ndarray:
        """A descriptor by its CSV name (one of :data:`rtvoice.survey.DESCRIPTOR_FIELDS`)."""
        return self.level_db if name == "level_db" else np.asarray(getattr(self, name))


@dataclass(frozen=True)
class NeckComparison:
    """Two placements over the same cells: ``main`` and the one it is compared ``against``.

    ``lost`` (strings, frets, harmonics) marks the lowest harmonics ``main`` loses against the
    other: present there (within ``missing_below_db`` of its strongest) and here either missing
    or more than ``lost_by_db`` weaker; ``gained`` the same the other way round.
    """

    main: NeckMap
    against: NeckMap
    harmonics: int
    lost_by_db: float
    lost: np.ndarray
    gained: np.ndarray

    def against_value(self, name: str) -> np.ndarray:
        """The other placement's descriptor; its level relative to ``main``'s open strings, so the
        two levels compare directly."""
        if name == "level_db":
            return _db(self.against.total_energy, self.main.open_energy[:, None])
        return self.against.value(name)

    def difference(self, name: str) -> np.ndarray:
        """``main`` minus ``against`` of a descriptor (for the level: 10 log10 of their energies)."""
        if name == "level_db":
            return _db(self.main.total_energy, self.against.total_energy)
        with np.errstate(invalid="ignore"):  # inf - inf: no even harmonic at either placement
            diff: np.ndarray = self.main.value(name) - self.against.value(name)
        return diff


def _db(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        out: np.ndarray = 10.0 * np.log10(num / den)
    return out


def neck_cells(settings: Settings, strings: Sequence[int] | None, frets: Sequence[int] | None
               ) -> tuple[tuple[int, ...], tuple[int, ...]]:
    """The strings and frets to map (all of them when None), checked against the instrument."""
    n_strings, n_frets = len(settings.strings), int(settings.get("instrument.frets"))
    strings = tuple(range(1, n_strings + 1)) if strings is None else tuple(dict.fromkeys(int(s) for s in strings))
    frets = tuple(range(n_frets + 1)) if frets is None else tuple(dict.fromkeys(int(f) for f in frets))
    if not strings or not frets:
        which = "--strings" if not strings else "--frets"
        raise SurveyError(which, "", "give at least one")
    for s in strings:
        if not 1 <= s <= n_strings:
            raise SurveyError("--strings", s, f"the instrument has strings 1 .. {n_strings} (1 = the highest)")
    for f in frets:
        if not 0 <= f <= n_frets:
            raise SurveyError("--frets", f, f"the instrument has frets 0 .. {n_frets} (0 = open)")
    return strings, frets


def survey_neck(
    settings: Settings,
    strings: Sequence[int] | None = None,
    frets: Sequence[int] | None = None,
    *,
    pickup_index: int = 0,
    window_s: float = DEFAULT_WINDOW_S,
    sample_rate_hz: float = 48000.0,
    missing_below_db: float = DEFAULT_MISSING_BELOW_DB,
    source: str = "--neck",
) -> NeckMap:
    """Descriptors of the settings' own placement at every string x fret (or the chosen ones).

    The settings are played as a fretted instrument whatever their ``instrument.assign``; a
    placement a fretted instrument refuses (a pickup or the pluck over the neck) raises
    SurveyError naming ``source``, as do strings or frets the instrument does not have.
    """
    settings = fretted_settings(settings, source)
    strings, frets = neck_cells(settings, strings, frets)
    if not window_s > 0:
        raise SurveyError("--window", window_s, "the listening window must be longer than 0 s")
    model = EngineModel(settings, sample_rate_hz, pickup_index)
    cells = [(s, f) for s in strings for f in frets] + [(s, 0) for s in strings]  # then each open string
    places = [placed_at(settings, s, f) for s, f in cells]
    notes = [note_model_at(settings, s, f, model.n_modes, model.fs) for s, f in cells]
    freqs = np.stack([n.freqs_hz for n in notes])  # (cells, modes)
    sigma = np.stack([n.sigma_per_s for n in notes])
    counts = np.array([n.playable for n in notes])
    sounding = np.arange(model.n_modes)[None, :] < counts[:, None]
    weights = np.stack([model.heard_weights(p, n.freqs_hz, n.sigma_per_s)
                        for p, n in zip(places, notes, strict=True)])
    electronics, chain = model.output_gains(freqs)
    bare = np.abs(np.stack([n.initial for n in notes]) * weights) ** 2
    bare *= np.where(sounding, chain**2 * window_factor(sigma, window_s), 0.0)  # no energy above the Nyquist margin
    energy = bare * electronics**2
    d = describe(energy, freqs, missing_below_db)
    with np.errstate(divide="ignore", invalid="ignore"):
        bare_total = bare.sum(axis=-1)
        centroid_bare = np.sum(bare * freqs, axis=-1) / bare_total
    n_cells = len(strings) * len(frets)
    shape = (len(strings), len(frets))

    def grid(a: np.ndarray) -> np.ndarray:
        return a[:n_cells].reshape(shape + a.shape[1:])

    scale_mm = float(settings.get("string.scale_length_mm"))
    pickup = settings.pickups[pickup_index]
    placed = places[:n_cells]
    position, slant = float(pickup["position"]), float(pickup.get("slant", 0.0))
    under = [placed[i * len(frets)] for i in range(len(strings))]  # one cell of each string
    return NeckMap(
        settings=settings,
        strings=strings,
        frets=frets,
        pickup_index=pickup_index,
        window_s=float(window_s),
        sample_rate_hz=float(sample_rate_hz),
        missing_below_db=float(missing_below_db),
        notes=grid(np.array([p.note for p in placed])),
        f1_hz=grid(freqs[:, 0]),
        mode_counts=grid(counts),
        pickup_mm=np.array([p.pickup_on_note(position, slant) / p.scale * scale_mm for p in under]),
        pickup_fraction=grid(np.array([p.pickup_on_note(position, slant) for p in placed])),
        pluck_fraction=grid(np.array([p.on_note(settings.get("excitation.position")) for p in placed])),
        energy=grid(np.where(energy < energy.max(axis=-1, keepdims=True) * ROUNDING_FLOOR, 0.0, energy)),
        open_energy=d.total_energy[n_cells:],
        centroid_hz=grid(d.centroid_hz),
        centroid_ratio=grid(d.centroid_ratio),
        odd_even_db=grid(d.odd_even_db),
        electronics_db=grid(_db(d.total_energy, bare_total)),
        centroid_bare_hz=grid(centroid_bare),
        missing=grid(d.missing & sounding),
    )


def compare_neck(
    settings: Settings,
    against: Settings,
    strings: Sequence[int] | None = None,
    frets: Sequence[int] | None = None,
    *,
    harmonics: int = DEFAULT_HARMONICS,
    lost_by_db: float = DEFAULT_LOST_BY_DB,
    **options,
) -> NeckComparison:
    """The placement of ``settings`` against that of ``against`` over the same cells.

    ``options`` are :func:`survey_neck`'s (pickup_index, window_s, sample_rate_hz,
    missing_below_db). SurveyError when ``against`` plays other notes (another tuning or
    stringing): a comparison is of two placements on one instrument.
    """
    if not harmonics >= 1:
        raise SurveyError("--harmonics", harmonics, "look at one harmonic or more")
    if not lost_by_db > 0:
        raise SurveyError("--lost-by", lost_by_db, "a harmonic is lost when it is weaker by more than 0 dB")
    main = survey_neck(settings, strings, frets, **options)
    other = survey_neck(against, main.strings, main.frets, **{**options, "source": "--against"})
    if not np.array_equal(main.notes, other.notes) or not np.allclose(main.f1_hz, other.f1_hz, rtol=1e-9):
        raise SurveyError("--against", "", "changes the notes the strings play (tuning or strings): compare two "
                          "placements on one instrument")
    h = min(harmonics, main.energy.shape[-1])
    mine, theirs = main.energy[..., :h], other.energy[..., :h]
    present_mine = ~main.missing[..., :h] & (mine > 0)
    present_theirs = ~other.missing[..., :h] & (theirs > 0)
    factor = 10.0 ** (-lost_by_db / 10.0)
    lost = present_theirs & (~present_mine | (mine < theirs * factor))
    gained = present_mine & (~present_theirs | (theirs < mine * factor))
    return NeckComparison(main, other, h, float(lost_by_db), lost, gained)


def harmonic_numbers(flags: np.ndarray) -> list[int]:
    """Harmonic numbers (from 1) of the True entries of one cell's flags."""
    return [int(k) + 1 for k in np.flatnonzero(flags)]


__all__ = [
    "DEFAULT_HARMONICS",
    "DEFAULT_LOST_BY_DB",
    "NeckComparison",
    "NeckMap",
    "compare_neck",
    "harmonic_numbers",
    "neck_cells",
    "survey_neck",
]
