"""Where the survey's notes sound: an open string of their own, or a string at a fret.

Under ``instrument.assign = open`` every note is an open string of its own and the
survey's positions are fractions of that note's length, as before the instrument had
strings. Under ``hand`` or ``channel`` a note sounds on one string at one fret, with the
pluck and the pickups fixed on the body: a fraction x of the open scale is x 2^(n/12) of
the note at fret n (12-TET fret rule, common practice). The engine decides which string
and fret (:class:`rtvoice.engine.Instrument`); so does the survey, by the same code, for a
single note-on on MIDI channel 1 with nothing sounding, or at an explicit string and fret
(played on channel ``string`` under the channel rule, as ``rtvoice render --string`` does).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from rtvoice.engine import Instrument, PlacedNote, Settings, SettingsError, note_name, placed_note
from rtvoice.survey.inputs import SurveyError


@dataclass(frozen=True)
class NotePlace:
    """A surveyed note and where it sounds: ``placed`` None under the open rule; ``channel`` (0-15)
    is the MIDI channel a render plays it on so that the engine puts it there too."""

    note: int
    placed: PlacedNote | None = None
    channel: int = 0

    @property
    def fretted(self) -> bool:
        return self.placed is not None

    @property
    def string(self) -> int:
        """1 = the highest string; 0 under the open rule."""
        return self.placed.string if self.placed else 0

    @property
    def fret(self) -> int:
        """0 = open; -1 under the open rule."""
        return self.placed.fret if self.placed else -1


def is_fretted(settings: Settings) -> bool:
    """True when the settings play notes on strings and frets (positions fixed on the body)."""
    return Instrument.from_settings(settings).fretted


def places_for(settings: Settings, notes: Sequence[int]) -> tuple[NotePlace, ...]:
    """Each note where the settings' rule puts a lone note-on on channel 1; SurveyError when no string can."""
    instrument = Instrument.from_settings(settings)
    if not instrument.fretted:
        return tuple(NotePlace(int(n)) for n in notes)
    out = []
    for n in notes:
        chosen = instrument.choose(int(n), 0, ())
        if chosen is None:
            rule = settings.get("instrument.assign")
            raise SurveyError(
                "--note", note_name(int(n)),
                f"no string plays it on MIDI channel 1 under instrument.assign = {rule} "
                f"(open notes {', '.join(note_name(o) for o in instrument.open_notes)}, "
                f"{instrument.frets} frets): survey it with --string S --fret F, or the neck with --neck")
        out.append(NotePlace(int(n), placed_at(settings, chosen.string, chosen.fret), 0))
    return tuple(out)


def fretted_settings(settings: Settings, source: str) -> Settings:
    """``settings`` with notes placed by MIDI channel (one per string), so a render plays string S on
    channel S; SurveyError naming ``source`` when the placement cannot sit on a fretted instrument
    (a pickup or the pluck over the neck)."""
    if settings.get("instrument.assign") == "channel":
        return settings
    try:
        return settings.with_values({"instrument.assign": "channel"})
    except SettingsError as err:
        raise SurveyError(err.key, err.value, err.reason, source, allowed=err.allowed) from None


def place_at(settings: Settings, string: int, fret: int) -> NotePlace:
    """The note at ``string`` (1 = highest) and ``fret``, played on channel ``string``; SurveyError
    for a string or fret the instrument does not have."""
    placed = placed_at(settings, string, fret)
    return NotePlace(placed.note, placed, string - 1)


def placed_at(settings: Settings, string: int, fret: int) -> PlacedNote:
    """The engine's :class:`PlacedNote` at ``string`` and ``fret``; SurveyError (``--string``, ``--fret``)
    for a string or fret the instrument does not have."""
    try:
        return placed_note(settings, int(string), int(fret))
    except SettingsError as err:
        raise SurveyError(f"--{err.key}", err.value, err.reason, allowed=err.allowed) from None


def check_placement(settings: Settings, changes: dict[str, float], key: str, spec: str) -> None:
    """SurveyError under ``key`` unless ``settings`` take ``changes`` (fractions of the open scale):
    the settings' own geometry check (on a fretted instrument the pluck and the pickups must lie
    between the saddle and the last fret)."""
    try:
        settings.with_values(changes)
    except SettingsError as err:
        raise SurveyError(key, spec, err.reason, allowed=err.allowed) from None


__all__ = ["NotePlace", "check_placement", "fretted_settings", "is_fretted", "place_at", "placed_at", "places_for"]
