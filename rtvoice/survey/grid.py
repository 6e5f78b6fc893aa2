"""The analytic survey: descriptors for every grid point at once, from the engine's modes.

Energy of harmonic k at a point is |s_k(pluck)|^2 |g_k(pickup, width, sensing)|^2
|H(f_k)|^2 W_k with W_k the listening-window factor, so a whole plane of pluck x
pickup positions is one broadcast product; a 100 x 100 grid takes well under a second.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from rtvoice.engine import Settings
from rtvoice.survey.descriptors import DEFAULT_MISSING_BELOW_DB, describe, level_db, window_factor
from rtvoice.survey.inputs import Placement, SurveyError, check_length
from rtvoice.survey.model import SENSINGS, EngineModel, NoteModes
from rtvoice.survey.placing import NotePlace, check_placement, places_for
from rtvoice.survey.result import DESCRIPTOR_FIELDS, SurveyPlane, SurveyResult

DEFAULT_WINDOW_S = 1.0
MAX_POINTS = 500_000
_CHUNK_ELEMENTS = 2_000_000  # points x harmonics held at once


def default_placement(settings: Settings, pickup_index: int = 0) -> Placement:
    """The placement the settings themselves have (the default reference)."""
    p = settings.pickups[pickup_index]
    return Placement(p["position"], settings.get("excitation.position"), p["width"])


def _as_grid(values: Iterable[float], kind: str, scale_mm: float, name: str) -> np.ndarray:
    arr = np.atleast_1d(np.asarray(list(values) if not isinstance(values, np.ndarray) else values, float))
    if arr.ndim != 1 or arr.size == 0:
        raise SurveyError(name, "", "empty grid: give at least one value")
    if not np.all(np.isfinite(arr)):
        bad = int(np.count_nonzero(~np.isfinite(arr)))
        raise SurveyError(name, f"{bad} of {arr.size} values", "grid values must be finite numbers")
    for v in (arr.min(), arr.max()):
        check_length(float(v), kind, scale_mm, name, f"{arr[0]:g} .. {arr[-1]:g}")
    return arr


def survey(
    settings: Settings,
    notes: Sequence[int],
    pickup_positions: Iterable[float],
    pluck_positions: Iterable[float] | None = None,
    widths: Iterable[float] | None = None,
    sensings: Sequence[str] | None = None,
    *,
    pickup_index: int = 0,
    window_s: float = DEFAULT_WINDOW_S,
    sample_rate_hz: float = 48000.0,
    reference: Placement | None = None,
    reference_sensing: str | None = None,
    missing_below_db: float = DEFAULT_MISSING_BELOW_DB,
    progress: Callable[[float], None] | None = None,
    places: Sequence[NotePlace] | None = None,
    past_last_fret: bool = False,
) -> SurveyResult:
    """Descriptors for every combination of note, sensing, pickup width, pluck and pickup position.

    Positions and widths are fractions of the speaking length from the bridge; the
    varied pickup is ``pickup_index`` (the others keep their settings). Omitted
    grids take the settings' own value. ``level_db`` is relative to ``reference``
    (default: the settings' own placement and sensing) for the same note.
    ``window_s`` is the listening window from the attack. Raises SurveyError for bad input.

    On a fretted instrument (``instrument.assign`` hand or channel) each note sounds where
    the settings' rule puts a lone note-on on channel 1, or at ``places`` (one per note,
    :func:`rtvoice.survey.placing.place_at`); positions and widths are then fractions of the
    open scale, fixed on the body, and must lie between the saddle and the last fret, as the
    settings require. With ``past_last_fret`` (the UI's map) they may lie over the neck, where
    the settings refuse a pickup or the pluck, as long as they fall on every note's speaking
    length: the map then carries the engine's formulas past what it plays.
    """
    ax = _Axes.checked(
        settings,
        notes,
        pickup_positions,
        pluck_positions,
        widths,
        sensings,
        pickup_index,
        window_s,
        reference,
        reference_sensing,
        places,
        past_last_fret,
    )
    model = EngineModel(settings, sample_rate_hz, pickup_index)
    init_sq = np.abs(model.initial_amplitudes(ax.plucks)) ** 2
    ref_init_sq = np.abs(model.initial_amplitudes([ax.reference.pluck])[0]) ** 2
    out = {name: np.empty(ax.shape) for name in DESCRIPTOR_FIELDS}
    missing = np.zeros(ax.shape + (model.n_modes,), bool)
    f1, counts = np.empty(len(ax.notes)), np.empty(len(ax.notes), int)
    steps, done = len(ax.notes) * len(ax.sensings) * ax.widths.size, 0
    chunk = max(1, _CHUNK_ELEMENTS // (ax.plucks.size * model.n_modes))
    for i_n, note in enumerate(ax.notes):
        modes = model.note_modes(note, ax.places[i_n])
        if modes.placed is not None:  # the pluck falls elsewhere on every fretted note
            init_sq = np.abs(model.initial_amplitudes(ax.plucks, modes)) ** 2
            ref_init_sq = np.abs(model.initial_amplitudes([ax.reference.pluck], modes)[0]) ** 2
        f1[i_n], counts[i_n] = modes.f1_hz, modes.count
        bare = modes.chain_gain**2 * window_factor(modes.sigma_per_s, window_s)
        full = bare * modes.electronics_gain**2
        ref = ax.reference
        g_ref = model.pickup_weights(modes, [ref.pickup], ref.width, ax.reference_sensing)[0]
        ref_total = float(np.sum(ref_init_sq[: modes.count] * np.abs(g_ref) ** 2 * full))
        plane = _Plane(init_sq[:, : modes.count], modes, full, bare, ref_total, missing_below_db)
        for i_s, sensing in enumerate(ax.sensings):
            for i_w, width in enumerate(ax.widths):
                g_sq = np.abs(model.pickup_weights(modes, ax.pickups, width, sensing)) ** 2
                for lo in range(0, ax.pickups.size, chunk):
                    cols = slice(lo, min(lo + chunk, ax.pickups.size))
                    plane.fill(out, missing, (i_n, i_s, i_w), cols, g_sq[cols])
                done += 1
                if progress:
                    progress(done / steps)
    return SurveyResult(
        settings=settings,
        notes=ax.notes,
        f1_hz=f1,
        mode_counts=counts,
        sensings=ax.sensings,
        widths=ax.widths,
        plucks=ax.plucks,
        pickups=ax.pickups,
        reference=ax.reference,
        reference_sensing=ax.reference_sensing,
        pickup_index=pickup_index,
        window_s=float(window_s),
        sample_rate_hz=float(sample_rate_hz),
        missing_below_db=float(missing_below_db),
        missing=missing,
        places=ax.places,
        **out,
    )


@dataclass(frozen=True)
class _Axes:
    """The survey's checked axes and reference."""

    notes: tuple[int, ...]
    sensings: tuple[str, ...]
    widths: np.ndarray
    plucks: np.ndarray
    pickups: np.ndarray
    reference: Placement
    reference_sensing: str
    places: tuple[NotePlace, ...]

    @property
    def shape(self) -> tuple[int, ...]:
        return (len(self.notes), len(self.sensings), self.widths.size, self.plucks.size, self.pickups.size)

    @classmethod
    def checked(
        cls, settings, notes, pickups, plucks, widths, sensings, pickup_index, window_s, reference, reference_sensing,
        places, past_last_fret,
    ) -> _Axes:
        scale_mm = float(settings.get("string.scale_length_mm"))
        if not 0 <= pickup_index < len(settings.pickups):
            raise SurveyError(
                "--pickup-index",
                pickup_index,
                f"the settings have {len(settings.pickups)} pickup(s): use 0 .. {len(settings.pickups) - 1}",
            )
        own = default_placement(settings, pickup_index)
        own_sensing = settings.pickups[pickup_index]["sensing"]
        if plucks is not None and settings.get("excitation.shape"):
            plucks = [float(p) for p in plucks]
            if len(plucks) > 1:
                raise SurveyError(
                    "--pluck",
                    f"{plucks[0]:g} .. {plucks[-1]:g}",
                    "excitation.shape is set, so the pluck position "
                    "has no effect (clear it with --set 'excitation.shape=[]')",
                )
        sensings = tuple(sensings) if sensings else (own_sensing,)
        reference_sensing = reference_sensing or own_sensing
        for s in (*sensings, reference_sensing):
            if s not in SENSINGS:
                raise SurveyError("--sensing", s, f"use one of {', '.join(SENSINGS)}")
        notes = tuple(int(n) for n in notes)
        if not notes:
            raise SurveyError("--note", [], "give at least one MIDI note")
        if not window_s > 0:
            raise SurveyError("--window", window_s, "the listening window must be longer than 0 s")
        reference = reference or own
        for kind in ("pickup", "pluck", "width"):
            check_length(getattr(reference, kind), kind, scale_mm, "--reference", str(reference))
        if places is None:
            places = places_for(settings, notes)
        elif len(places) != len(notes) or any(p.note != n for p, n in zip(places, notes, strict=False)):
            raise SurveyError("places", len(places), "give one place per note, for the same notes")
        axes = cls(
            notes,
            sensings,
            _as_grid([own.width] if widths is None else widths, "width", scale_mm, "--width"),
            _as_grid([own.pluck] if plucks is None else plucks, "pluck", scale_mm, "--pluck"),
            _as_grid(pickups, "pickup", scale_mm, "--pickup"),
            reference,
            reference_sensing,
            tuple(places),
        )
        total = int(np.prod(axes.shape))
        if total > MAX_POINTS:
            raise SurveyError(
                "grid", " x ".join(map(str, axes.shape)), f"{total} points; a survey computes at most {MAX_POINTS}"
            )
        if any(p.fretted for p in axes.places):
            if past_last_fret:
                axes.check_on_notes(settings, pickup_index)
            else:
                axes.check_on_body(settings, pickup_index)
        return axes

    def check_on_notes(self, settings: Settings, pickup_index: int) -> None:
        """SurveyError unless the surveyed pickup's (slanted) ends and the pluck lie on every fretted
        note's speaking length (a fraction of the open scale below 2^(-fret/12))."""
        slant = abs(float(settings.pickups[pickup_index].get("slant", 0.0))) / 2
        ref = self.reference
        for place in self.places:
            if place.placed is None:
                continue
            length = 1.0 / place.placed.scale
            for name, far in (("--pickup", float(self.pickups.max()) + slant), ("--pluck", float(self.plucks.max())),
                              ("--reference", max(ref.pickup + slant, ref.pluck))):
                if far >= length:
                    raise SurveyError(name, f"{far:.4g}", f"lies past the end of note {place.note} at string "
                                      f"{place.string}, fret {place.fret} ({length:.4g} of the open scale)")

    def check_on_body(self, settings: Settings, pickup_index: int) -> None:
        """SurveyError unless the settings take every grid's ends and the reference (the pluck and
        the pickups fixed on the body, between the saddle and the last fret)."""
        key = f"pickup.{pickup_index}"
        for name, grid, param in (
            ("--pickup", self.pickups, f"{key}.position"),
            ("--pluck", self.plucks, "excitation.position"),
            ("--width", self.widths, f"{key}.width"),
        ):
            for value in (float(grid.min()), float(grid.max())):
                check_placement(settings, {param: value}, name, f"{grid[0]:g} .. {grid[-1]:g}")
        ref = self.reference
        check_placement(
            settings,
            {f"{key}.position": ref.pickup, "excitation.position": ref.pluck, f"{key}.width": ref.width},
            "--reference",
            str(ref),
        )


@dataclass(frozen=True)
class _Plane:
    """What one note contributes to every point: |s_k|^2 per pluck and the per-mode gains."""

    s_sq: np.ndarray  # (plucks, harmonics)
    modes: NoteModes
    full: np.ndarray  # output gain^2 x window factor, with electronics
    bare: np.ndarray  # the same without electronics
    ref_total: float
    missing_below_db: float

    def fill(self, out: dict, missing: np.ndarray, at: tuple, cols: slice, g_sq: np.ndarray) -> None:
        """Descriptors of plucks x pickups[cols] into the output arrays at index ``at``."""
        energy = self.s_sq[:, None, :] * (g_sq * self.full)[None, :, :]  # (plucks, pickups, harmonics)
        d = describe(energy, self.modes.freqs_hz, self.missing_below_db)
        bare_w = g_sq * self.bare
        with np.errstate(divide="ignore", invalid="ignore"):
            bare_total = self.s_sq @ bare_w.T
            centroid_bare = (self.s_sq @ (bare_w * self.modes.freqs_hz).T) / bare_total
            elec_db = 10 * np.log10(d.total_energy / bare_total)
        idx = (*at, slice(None), cols)
        out["centroid_hz"][idx] = d.centroid_hz
        out["centroid_ratio"][idx] = d.centroid_ratio
        out["odd_even_db"][idx] = d.odd_even_db
        out["level_db"][idx] = level_db(d.total_energy, self.ref_total)
        out["electronics_db"][idx] = elec_db
        out["centroid_bare_hz"][idx] = centroid_bare
        missing[idx][..., : self.modes.count] = d.missing


def survey_grid(
    settings: Settings,
    note: int,
    pickup_positions: Iterable[float],
    pluck_positions: Iterable[float] | None = None,
    *,
    width: float | None = None,
    sensing: str | None = None,
    pickup_index: int = 0,
    window_s: float = DEFAULT_WINDOW_S,
    sample_rate_hz: float = 48000.0,
    reference: Placement | None = None,
    missing_below_db: float = DEFAULT_MISSING_BELOW_DB,
    past_last_fret: bool = False,
) -> SurveyPlane:
    """One plane of descriptors, pluck (rows) x pickup (columns), for the UI's map.

    Pure: no I/O, the settings are not changed. Positions are fractions from the bridge (of the
    open scale on a fretted instrument, where they must stay short of the last fret unless
    ``past_last_fret``: see :func:`survey`).
    """
    result = survey(
        settings,
        [note],
        pickup_positions,
        pluck_positions,
        None if width is None else [width],
        None if sensing is None else [sensing],
        pickup_index=pickup_index,
        window_s=window_s,
        sample_rate_hz=sample_rate_hz,
        reference=reference,
        missing_below_db=missing_below_db,
        past_last_fret=past_last_fret,
    )
    return result.plane()


def placement_energies(
    settings: Settings,
    note: int,
    placements: Sequence[Placement],
    sensing: str | None = None,
    *,
    pickup_index: int = 0,
    window_s: float = DEFAULT_WINDOW_S,
    sample_rate_hz: float = 48000.0,
    place: NotePlace | None = None,
) -> tuple[NoteModes, np.ndarray]:
    """(modes, each harmonic's energy over the window: shape (n_placements, modes.count)).

    ``place``: where the note sounds (default: where the settings' rule puts it)."""
    model = EngineModel(settings, sample_rate_hz, pickup_index)
    sensing = sensing or settings.pickups[pickup_index]["sensing"]
    modes = model.note_modes(note, place or places_for(settings, [note])[0])
    full = modes.chain_gain**2 * modes.electronics_gain**2 * window_factor(modes.sigma_per_s, window_s)
    rows = []
    for p in placements:
        if modes.placed is not None:
            key = f"pickup.{pickup_index}"
            check_placement(settings, {f"{key}.position": p.pickup, "excitation.position": p.pluck,
                                       f"{key}.width": p.width}, "--compare", str(p))
        s_sq = np.abs(model.initial_amplitudes([p.pluck], modes)[0, : modes.count]) ** 2
        g_sq = np.abs(model.pickup_weights(modes, [p.pickup], p.width, sensing)[0]) ** 2
        rows.append(s_sq * g_sq * full)
    return modes, np.array(rows)
