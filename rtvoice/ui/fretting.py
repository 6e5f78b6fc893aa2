"""The fretted instrument as the UI sees it: whether the sound plays strings and frets, where the
engine's voices sound on them, and the neck view's picture and elements in terms of the settings.

Settings keep the pluck, the pickups and their apertures as fractions of the open scale length
(``string.scale_length_mm``); on a fretted instrument they stay where they are on the body, so the
neck view shows them in mm from the saddle: a slanted pickup's centre is ``pickup.N.position``, its
treble end (under string 1) ``slant`` / 2 further from the saddle and its bass end as much nearer.
No Textual here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from rtvoice.engine import Settings
from rtvoice.host.board import SILENT_DB
from rtvoice.ui.widgets.neck_layout import (
    HAND,
    PLUCK,
    NeckPicture,
    PickupPlace,
    SoundingNote,
    pickup_index,
)

SCALE_KEY = "string.scale_length_mm"
#: A sounding note's level is shown in steps this coarse: its mark's colour changes at a few
#: levels only, and a picture that stays equal is not redrawn while the note decays.
LEVEL_STEP_DB = 3.0


@dataclass(frozen=True)
class Place:
    """Where a note sounds: ``string`` (1 = the highest) stopped at ``fret`` (0 = open)."""

    string: int
    fret: int


@dataclass(frozen=True)
class LivePlaces:
    """Where the engine's voices sound on a fretted instrument, as of its last update: the loudest
    voice's place (None under the open rule or when nothing sounds) and, per string (string 1
    first), the fret sounding there (-1: silent) and its level in dB re full scale."""

    loudest: Place | None = None
    frets: tuple[int, ...] = ()
    levels_db: tuple[float, ...] = ()

    @classmethod
    def from_snapshot(cls, snap: Any) -> LivePlaces:
        """Read from the engine link's :class:`~rtvoice.host.link.Snapshot` (one without the fields, as
        a test's stand-in link may give, reads as nothing sounding on a string)."""
        string, fret = int(getattr(snap, "string", 0)), int(getattr(snap, "fret", -1))
        loudest = Place(string, fret) if string >= 1 and fret >= 0 else None
        return cls(loudest, tuple(getattr(snap, "string_frets", ())), tuple(getattr(snap, "string_levels_db", ())))


def is_fretted(settings: Settings) -> bool:
    """True when notes sound on the instrument's strings and frets (``instrument.assign`` not open)."""
    return bool(settings.get("instrument.assign") != "open")


def pickup_places(settings: Settings) -> tuple[PickupPlace, ...]:
    """Every pickup in mm from the saddle: bass and treble ends (position -/+ slant / 2) and aperture."""
    scale_mm = float(settings.get(SCALE_KEY))
    out = []
    for p in settings.pickups:
        centre, half_slant = float(p["position"]) * scale_mm, float(p.get("slant", 0.0)) * scale_mm / 2
        out.append(PickupPlace(bass_mm=centre - half_slant, treble_mm=centre + half_slant,
                               aperture_mm=float(p["width"]) * scale_mm))
    return tuple(out)


def sounding_notes(places: LivePlaces, string_count: int) -> tuple[SoundingNote, ...]:
    """The notes sounding on the first ``string_count`` strings, the loudest voice's marked."""
    out = []
    for i, fret in enumerate(places.frets[:string_count]):
        if fret < 0:
            continue
        level_db = places.levels_db[i] if i < len(places.levels_db) else SILENT_DB
        stepped_db = LEVEL_STEP_DB * round(level_db / LEVEL_STEP_DB)
        out.append(SoundingNote(i + 1, fret, stepped_db, loudest=places.loudest == Place(i + 1, fret)))
    return tuple(out)


def neck_picture(settings: Settings, places: LivePlaces, selected: str) -> NeckPicture:
    """What the neck view draws of ``settings`` with the voices in ``places``."""
    scale_mm = float(settings.get(SCALE_KEY))
    open_notes = tuple(int(entry.note) for entry in settings.strings)
    return NeckPicture(
        scale_length_mm=scale_mm,
        frets=int(settings.get("instrument.frets")),
        open_notes=open_notes,
        pickups=pickup_places(settings),
        pluck_mm=float(settings.get("excitation.position")) * scale_mm,
        pluck_width_mm=float(settings.get("excitation.width")) * scale_mm,
        hand_fret=float(settings.get("hand.fret")),
        sounding=sounding_notes(places, len(open_notes)),
        selected=selected,
    )


def element_parameter(element: str) -> str | None:
    """The parameter a neck element's keys move: the pluck's and a pickup's position (a pickup's
    whole, both ends of a slant together), the hand's fret; None for no such element."""
    if element == PLUCK:
        return "excitation.position"
    if element == HAND:
        return "hand.fret"
    index = pickup_index(element)
    return None if index is None else f"pickup.{index}.position"


def place_fits(settings: Settings, place: Place) -> bool:
    """Whether ``settings``' instrument has ``place`` (its string, its fret, a MIDI note there)."""
    strings = settings.strings
    return (1 <= place.string <= len(strings) and 0 <= place.fret <= int(settings.get("instrument.frets"))
            and int(strings[place.string - 1].note) + place.fret <= 127)


def lowest_open(settings: Settings) -> Place:
    """The lowest string, open: the place the bars show before anything is played."""
    return Place(len(settings.strings), 0)


def place_words(place: Place) -> str:
    """``string 5, fret 12`` (``open`` for fret 0)."""
    return f"string {place.string}, " + ("open" if place.fret == 0 else f"fret {place.fret}")


def hand_words(settings: Settings) -> str:
    """``hand at fret 5`` (the fretting hand's place, as the status line shows it)."""
    return f"hand at fret {float(settings.get('hand.fret')):g}"
