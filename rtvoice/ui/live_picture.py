"""The app's live picture: about 30 times a second it reads the engine's snapshot and hands each
view what it shows (harmonic bars against the prediction, the output spectrum, the A/B comparison),
the meters, and the top line; a climbing xrun count is explained on the message line. On a
fretted instrument the neck view shows where the strings sound, and the bars follow the loudest
voice at its string and fret.

A mixin for :class:`rtvoice.ui.app.RtvoiceApp`, which provides the widgets (``bars``, ``spectrum``,
``compare``, ``views``, ``meters``, ``sound_line``, ``string_view``, ``neck_view``, ``params``), ``engine``,
``session``, ``player`` and the message line (declared in :mod:`rtvoice.ui.app_parts`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from rtvoice.engine import Settings, SettingsError, placed_note
from rtvoice.physics.modes import unstiffened_f0_hz
from rtvoice.ui.app_parts import AppParts
from rtvoice.ui.compare import SlotComparison, compare_slots
from rtvoice.ui.format import note_name
from rtvoice.ui.fretting import (
    LivePlaces,
    Place,
    hand_words,
    is_fretted,
    lowest_open,
    neck_picture,
    place_fits,
    place_words,
)
from rtvoice.ui.prediction import predicted_levels_at, predicted_levels_db
from rtvoice.ui.words import xrun_note

if TYPE_CHECKING:
    from rtvoice.host.link import Snapshot

METER_EVERY = 3  # numbers are read, not watched: 10 updates a second are plenty
XRUN_NOTE_EVERY_S = 5.0  # a climbing xrun count is explained at most this often
STARTUP_XRUNS_S = 2.0  # xruns in the UI's first seconds (the stream starting) are counted, not explained
PREDICTED_MIN = 32  # harmonics predicted even when fewer fit on screen
UNBENT = 1e-6  # a measured pitch this close (relatively) to the fretted note's own is the note unbent


class LivePicture(AppParts):
    """What the app draws from the running engine, frame by frame."""

    def _title_views(self, caption: str = "") -> None:
        if self.view == "harmonics":
            title = f"harmonics {caption} — █ live, │ predicted at the attack"
        elif self.view == "compare":
            title = f"A/B {caption} — █ slot A, │ slot B, predicted at the attack (playing: {self.session.active})"
        else:
            title = f"output spectrum {caption} — ^ marks the harmonics"
        if self.views.border_title != title:  # an unchanged title must not cost a repaint
            self.views.border_title = title


    # -- the live picture ----------------------------------------------------------
    def _tick(self) -> None:
        try:
            self._tick_once()
        except Exception as err:  # noqa: BLE001 - a timer that raises would stop; the picture must go on
            self.report_unexpected(err, "the live picture")

    def _tick_once(self) -> None:
        if self._restarting:  # the link is being rebuilt on another thread: leave it alone
            return
        self.frames += 1
        snap = self.engine.snapshot()
        for msg in self.engine.messages():
            self._engine_message(msg)
        moved = self.engine.moved_values(self.session.settings)
        if moved:
            try:
                self.session.set_values(moved, source="controller")
            except SettingsError:
                pass
            else:
                self._refresh_sound()
        if self.frames % METER_EVERY == 0 or not snap.engine_alive:
            self.meters.show_snapshot(snap)
            self._explain_xruns(snap)
        if not snap.engine_alive:
            if not self._engine_down_said:
                self._engine_down_said = True
                self.say_error("error: the engine has stopped; press ctrl+r to restart it")
        else:
            self._engine_down_said = False
        self._snap = snap
        self._draw_live(snap)

    def _explain_xruns(self, snap: Snapshot) -> None:
        """When the xrun count climbs, say why: rtvoice's own callback overran its period (``late``
        climbed too), or it finished in time and the machine or the audio server held it up."""
        xruns, late = int(getattr(snap, "xruns", 0)), int(getattr(snap, "late", 0))
        seen_xruns, seen_late, said_at = self._xrun_seen
        if xruns <= seen_xruns:
            return
        now = self.frames / self.frame_rate_hz
        if said_at < 0 and now < STARTUP_XRUNS_S:  # a stream's first periods often drop one: not news
            self._xrun_seen = (xruns, late, -1.0)
            return
        if now - said_at < XRUN_NOTE_EVERY_S and said_at >= 0:
            return  # the count keeps climbing on the meters; the reason is said now and then
        self.say_error(xrun_note(xruns - seen_xruns, xruns, late - seen_late))
        self._xrun_seen = (xruns, late, now)

    def _draw_live(self, snap: Snapshot | None) -> None:
        """Bars (or spectrum), their title, the neck and the top line, from ``snap`` and the sound now set."""
        if snap is None:
            return
        settings = self.session.settings
        places = self.engine.places
        note = snap.note if snap.note >= 0 else self.last_note
        place = self._bars_place(settings, snap, places)
        f0 = None
        # The host reports the loudest voice's first partial, bend included (on a fretted instrument
        # only worth reading when the bars show that voice, not a note from before the rule changed).
        if snap.note >= 0 and snap.f0_hz > 0 and (place is None or place == places.loudest):
            f0 = self._unstiffened_f0_hz(settings, snap.f0_hz, place)
        if place is not None:
            note = int(settings.strings[place.string - 1].note) + place.fret
        if self.view == "harmonics":
            bars = self.bars
            # The prediction is for the loudest voice's own velocity (the keyboard's before any note).
            velocity = int(getattr(snap, "velocity", 0) or self.player.velocity)
            n = max(PREDICTED_MIN, bars.harmonics_shown())
            predicted = self._predicted_for(note, f0, n, velocity, place)
            live = None
            if snap.note >= 0:
                live = self.engine.live_levels_db(settings, snap)
            bars.show_levels(live, predicted)
        elif self.view == "compare":
            velocity = int(getattr(snap, "velocity", 0) or self.player.velocity)
            self.compare.show_comparison(self._comparison_for(note, max(PREDICTED_MIN,
                                                                        self.compare.harmonics_shown()), velocity,
                                                              place))
        else:
            marks = snap.mode_freqs_hz if snap.note >= 0 else None
            nyquist_hz = self.sample_rate_hz / 2
            self.spectrum.show_spectrum(snap.spectrum_db, snap.spectrum_bin_hz, marks, nyquist_hz)
        where = "" if place is None else f" on {place_words(place)}"
        caption = f"of {note_name(note)}{where}" + ("" if snap.note >= 0 else " (last note; none ringing)")
        self._title_views(caption)
        if is_fretted(settings):
            self.neck_view.update_picture(neck_picture(settings, places, self.neck_selected))
        self._refresh_line(snap.note)

    def _bars_place(self, settings: Settings, snap: Snapshot, places: LivePlaces) -> Place | None:
        """Where the note the bars follow sounds on a fretted instrument: the loudest voice's place,
        else the last one played, else the lowest string open; None under the open rule."""
        if not is_fretted(settings):
            return None
        if snap.note >= 0 and places.loudest is not None:
            self.last_place = places.loudest
        place = self.last_place
        return place if place is not None and place_fits(settings, place) else lowest_open(settings)

    def _unstiffened_f0_hz(self, settings: Settings, first_partial_hz: float, place: Place | None) -> float | None:
        """The loudest voice's pitch without its stiffness (the first partial is sqrt(1 + B) sharp);
        on a fretted instrument None when that is the note's own pitch (not bent)."""
        if place is None:
            return float(unstiffened_f0_hz(first_partial_hz, settings.get("string.inharmonicity")))
        placed = placed_note(settings, place.string, place.fret)
        f0 = float(unstiffened_f0_hz(first_partial_hz, placed.inharmonicity))
        return None if abs(f0 / placed.f0_hz - 1.0) < UNBENT else f0

    def _comparison_for(self, note: int, n: int, velocity: int, place: Place | None = None) -> SlotComparison:
        """Slots A and B predicted for one note, recomputed only when a sound, the note or the size changes."""
        a, b = self.session.slots["A"].settings, self.session.slots["B"].settings
        key = (id(a), id(b), note, place, n, velocity)
        if key != self._compared_key or self._compared is None:
            self._compared_key = key
            self._compared = compare_slots(a, b, note, n, velocity, self.sample_rate_hz, place)
        return self._compared

    def _predicted_for(self, note: int, f0_hz: float | None, n: int, velocity: int,
                       place: Place | None = None) -> np.ndarray:
        """Predicted attack levels (at ``place`` on a fretted instrument), recomputed only when the
        sound, note, place or size changes."""
        settings = self.session.settings
        f0_key = None if f0_hz is None else round(f0_hz, 3)
        key = (id(settings), note, place, f0_key, n, velocity)
        if key != self._predicted_key:
            self._predicted_key = key
            if place is None:
                self._predicted = predicted_levels_db(settings, note, n, velocity, f0_hz, self.sample_rate_hz)
            else:
                self._predicted = predicted_levels_at(settings, place.string, place.fret, n, velocity, f0_hz,
                                                      self.sample_rate_hz)
        return self._predicted

    def _refresh_line(self, note: int = -1) -> None:
        slot = self.session.slot
        settings = slot.settings
        fretted = is_fretted(settings)
        self.sound_line.show(
            preset=slot.preset, origin=slot.origin, dirty=slot.dirty, slot=self.session.active,
            octave=self.player.shift, note=note, learning=self.learning,
            hand=hand_words(settings) if fretted else "", keys=self.player.rows_words(settings) if fretted else "",
        )

    def _refresh_sound(self) -> None:
        """Hand the current settings to every widget that draws them."""
        s = self.session.settings
        other = self.session.slots["B" if self.session.active == "A" else "A"].settings
        self.string_view.show_settings(s, other)
        self._show_instrument(s)
        self.show_strings(s)
        self.params.show_settings(s, self.engine.controls())
        self._refresh_line()
        self._draw_live(self._snap)
