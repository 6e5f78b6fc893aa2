"""From recorded takes to the instrument that sounds like them: string, fret, stiffness, loss, pluck,
pickup and electronics, as settings a render plays.

The takes' partials (:mod:`rtvoice.fit.analysis`) give f0, B and the loss law; the note and the
instrument's tuning give the string and fret (or the user does); the partial levels give the pluck
and pickup distances, aperture and resonance (:mod:`rtvoice.fit.placement`). The fitted settings are
the instrument's (a preset's, or the default six-string) with that string's B (at the open string:
B at fret n is 2^(n/6) times the open string's, Fletcher 1964 with L 2^(-n/12)), its T60s, the
tuning, the pluck, the one pickup and its circuit changed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from rtvoice.engine import Instrument, Settings, SettingsError, note_name
from rtvoice.errors import UserError
from rtvoice.fit.analysis import PartialAnalysis, analyse_take
from rtvoice.fit.placement import (
    Assignment,
    GroupPlacementFit,
    PartialLevels,
    PlacementFit,
    fit_placement,
    fit_placement_group,
    weights_from_level_sd,
)
from rtvoice.fit.take import Take
from rtvoice.physics.frets import speaking_length_mm

#: A note within this many cents of a 12-TET note is that note (a detuned take is still its note).
NOTE_TOLERANCE_CENTS = 50.0


class FitError(UserError):
    """The takes cannot be fitted to the instrument (a note it cannot play, takes of different notes)."""


@dataclass(frozen=True)
class Where:
    """The string and fret a note was played at, and how they were chosen."""

    note: int
    string: int
    fret: int
    chosen: str  # "given" (--string / --fret) or "lowest fret" (the tuning's choice)


@dataclass(frozen=True)
class InstrumentFit:
    """What the takes say of the instrument, and the settings that play it."""

    settings: Settings
    where: Where
    scale_length_mm: float
    speaking_length_mm: float
    sensing: str
    analyses: tuple[PartialAnalysis, ...]
    placement: PlacementFit | GroupPlacementFit
    cents_off: float  # the take's f0 against the 12-TET note at the base's A4 (the fitted tuning absorbs it)

    @property
    def plucks_mm(self) -> tuple[float, ...]:
        p = self.placement
        return p.pluck_mm if isinstance(p, GroupPlacementFit) else (p.pluck_mm,)

    @property
    def plucks_sd_mm(self) -> tuple[float, ...]:
        p = self.placement
        return p.pluck_sd_mm if isinstance(p, GroupPlacementFit) else (p.pluck_sd_mm,)

    @property
    def f0_hz(self) -> float:
        return float(np.mean([a.inharmonicity.f0_hz for a in self.analyses]))

    def summary(self) -> dict:
        """The estimates and their uncertainties, as the command's ``--json`` prints them."""
        a, p = self.analyses, self.placement
        inh = [x.inharmonicity for x in a]
        loss = [x.loss for x in a]
        several = len(a) > 1
        return {
            "f0_hz": self.f0_hz, "f0_sd_hz": _pooled([x.f0_sd_hz for x in inh]),
            "inharmonicity": float(np.mean([x.inharmonicity for x in inh])),
            "inharmonicity_sd": _pooled([x.inharmonicity_sd for x in inh]),
            "t60_low_s": float(np.mean([x.t60_low_s for x in loss])),
            "t60_low_sd_s": _pooled([x.t60_low_sd_s for x in loss]),
            "t60_high_s": float(np.mean([x.t60_high_s for x in loss])),
            "t60_high_sd_s": _pooled([x.t60_high_sd_s for x in loss]),
            "pluck_mm": list(self.plucks_mm) if several else self.plucks_mm[0],
            "pluck_sd_mm": list(self.plucks_sd_mm) if several else self.plucks_sd_mm[0],
            "pickup_mm": p.pickup_mm, "pickup_sd_mm": p.pickup_sd_mm,
            "assignment": p.assignment.value, "assignment_why": p.why,
            "aperture_mm": p.aperture_mm, "aperture_sd_mm": p.aperture_sd_mm,
            "resonance_hz": p.resonance_hz, "resonance_sd_hz": p.resonance_sd_hz, "q": p.q, "q_sd": p.q_sd,
            "sensing": self.sensing, "string": self.where.string, "fret": self.where.fret,
            "note": self.where.note, "note_name": note_name(self.where.note), "string_chosen": self.where.chosen,
            "scale_length_mm": self.scale_length_mm, "speaking_length_mm": self.speaking_length_mm,
            "cents_off": self.cents_off,
            "explained_energy": float(np.mean([x.explained_energy for x in a])),
            "explained_energy_per_take": [x.explained_energy for x in a],
            "partials_used": [sum(1 for q in x.partials if q.usable) for x in a],
        }


def _pooled(sds: Sequence[float]) -> float:
    """The sd of the mean of independent estimates with these sds."""
    return float(math.sqrt(sum(s * s for s in sds)) / len(sds))


def note_of(f0_hz: float, a4_hz: float) -> tuple[int, float]:
    """The 12-TET MIDI note nearest ``f0_hz`` and how many cents the take lies above it
    (MIDI note 69 = A4, common practice)."""
    exact = 69.0 + 12.0 * math.log2(f0_hz / a4_hz)
    note = int(round(exact))
    return note, 100.0 * (exact - note)


def place_note(settings: Settings, note: int, string: int | None, fret: int | None) -> Where:
    """Where ``note`` was played: on ``string`` (at ``fret`` if given, which must agree), else at the
    lowest fret any string reaches it (common practice for a single note: the open string first)."""
    opens = [int(e.note) for e in settings.strings]
    frets = int(settings.get("instrument.frets"))
    instrument = Instrument.from_settings(settings.with_values({"instrument.assign": "channel"}))
    if string is not None:
        if not 1 <= string <= len(opens):
            raise FitError("no such string on the instrument", key="--string", value=string,
                           allowed=f"1 .. {len(opens)}")
        placed = instrument.on_string(note, string)
        if placed is None:
            raise FitError(f"string {string} ({note_name(opens[string - 1])} open, {frets} frets) cannot play "
                           f"the take's note {note_name(note)}", key="--string", value=string)
        if fret is not None and fret != placed.fret:
            raise FitError(f"the take's note {note_name(note)} lies at fret {placed.fret} of string {string}, "
                           f"not fret {fret}", key="--fret", value=fret)
        return Where(note, string, placed.fret, "given")
    if fret is not None:
        for s, open_note in enumerate(opens, start=1):
            if open_note + fret == note:
                return Where(note, s, fret, "given")
        raise FitError(f"no string plays {note_name(note)} at fret {fret}", key="--fret", value=fret)
    options = [(note - o, s) for s, o in enumerate(opens, start=1) if 0 <= note - o <= frets]
    if not options:
        raise FitError(f"the instrument cannot play the take's note {note_name(note)} "
                       f"(its strings reach {note_name(min(opens))} .. {note_name(max(opens) + frets)})",
                       key="note", value=note)
    best_fret, best_string = min(options)
    return Where(note, best_string, best_fret, "lowest fret")


def fit_takes(takes: Sequence[Take], base: Settings, *, string: int | None = None, fret: int | None = None,
              sensing: str | None = None, pickup_mm: float | None = None,
              scale_length_mm: float | None = None) -> InstrumentFit:
    """Fit the instrument to ``takes`` of one string at one fret (several takes: plucked at different
    spots). ``base``: the instrument (its strings, frets and scale, unless ``scale_length_mm``);
    ``sensing``: the pickup's (else the base's first pickup's); ``pickup_mm``: the pickup's distance
    from the saddle when known."""
    if not takes:
        raise FitError("no takes to fit")
    if scale_length_mm is not None:
        base = base.with_values({"string.scale_length_mm": scale_length_mm}, "--scale-length")
    scale_mm = float(base.get("string.scale_length_mm"))
    sensing = sensing or str(base.get("pickup.0.sensing"))
    analyses = tuple(analyse_take(t) for t in takes)
    a4 = float(base.get("tuning.a4_hz"))
    notes = [note_of(a.inharmonicity.f0_hz, a4) for a in analyses]
    if len({n for n, _ in notes}) > 1:
        shown = ", ".join(f"{t.source}: {note_name(n)}" for t, (n, _) in zip(takes, notes, strict=True))
        raise FitError(f"the takes are of different notes ({shown}); fit takes of one string at one fret together")
    note = notes[0][0]
    cents = float(np.mean([c for _, c in notes]))
    where = place_note(base, note, string, fret)
    length_mm = float(speaking_length_mm(scale_mm, where.fret))
    levels = [_levels(a) for a in analyses]
    if len(takes) == 1:
        placement: PlacementFit | GroupPlacementFit = fit_placement(
            *levels[0], speaking_length_mm=length_mm, sensing=sensing, pickup_mm=pickup_mm)
    else:
        placement = fit_placement_group([PartialLevels(*lv) for lv in levels], speaking_length_mm=length_mm,
                                        sensing=sensing, pickup_mm=pickup_mm)
    fit = InstrumentFit(base, where, scale_mm, length_mm, sensing, analyses, placement, cents)
    return replace(fit, settings=fitted_settings(fit))


def _levels(a: PartialAnalysis) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(k, freq_hz, level, weight) of a take's usable partials, weighted by how well each level is known."""
    used = [p for p in a.partials if p.usable]
    k = np.array([p.k for p in used], float)
    freq = np.array([p.freq_hz for p in used])
    level = np.array([p.level for p in used])
    weight = weights_from_level_sd(level, np.array([p.level_sd for p in used]))
    return k, freq, level, weight


def fitted_settings(fit: InstrumentFit) -> Settings:
    """``fit.settings`` (the base instrument) with what the takes showed: the string's open B and T60s, the tuning, the
    pluck (the first take's), the one pickup at its distance with its aperture and sensing, and the
    resonance set directly (the circuit values cleared) where the partials reached it."""
    base, where, p = fit.settings, fit.where, fit.placement
    summary = fit.summary()
    n = where.string
    b_open = summary["inharmonicity"] / 2.0 ** (where.fret / 6.0)
    # Written to the precision the estimates have (a tenth of a mm, a thousandth of a cent's Hz, ...).
    t60_low = round(summary["t60_low_s"], 3)
    changes: dict[str, object] = {
        f"strings.{n}.inharmonicity": float(f"{b_open:.4g}"),
        f"strings.{n}.t60_low": t60_low,
        f"strings.{n}.t60_high": max(min(round(summary["t60_high_s"], 3), t60_low), 0.01),
        "tuning.a4_hz": round(float(base.get("tuning.a4_hz")) * 2.0 ** (fit.cents_off / 1200.0), 3),
        "excitation.position": f"{fit.plucks_mm[0]:.1f}mm",
        "pickup.0.position": f"{p.pickup_mm:.1f}mm",
        "pickup.0.slant": 0.0,
        "pickup.0.sensing": fit.sensing,
    }
    if p.aperture_mm is not None:
        changes["pickup.0.width"] = f"{p.aperture_mm:.1f}mm"
    if p.resonance_hz is not None and p.q is not None:
        changes.update({"electronics.inductance_h": 0.0, "electronics.resonance_hz": round(p.resonance_hz),
                        "electronics.q": round(p.q, 2)})
    try:  # one pickup was fitted: the others were not in the take
        fitted = base.with_pickup_count(1).with_values(changes, "fit")
    except SettingsError as err:
        raise FitError(f"the fitted instrument is not one rtvoice can play: {err}") from None
    what = (f"Fitted to a take of {note_name(where.note)} on string {n} at fret {where.fret}: pluck "
            + ", ".join(f"{x:.0f}" for x in fit.plucks_mm) + f" mm and pickup {p.pickup_mm:.0f} mm from the saddle"
            + (" (which is which is a guess)" if p.assignment is Assignment.GUESS else "") + ".")
    return fitted.renamed("fitted", what)


__all__ = ["FitError", "InstrumentFit", "Where", "fit_takes", "fitted_settings", "note_of", "place_note"]
