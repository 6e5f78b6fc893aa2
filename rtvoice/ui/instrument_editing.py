"""The fretted instrument in the app: the neck view in place of the one-string view, its moves
and the hand, the keyboard rows on the strings, and the strings' table.

A mixin for :class:`rtvoice.ui.app.RtvoiceApp`, which provides ``session``, ``engine``, ``player``,
``params``, ``string_view``, ``neck_view``, ``change``, ``ask_typed``, ``say`` and ``say_error``
(declared in :mod:`rtvoice.ui.app_parts`). Every change goes through ``change``: validated by the
session first, so a move the instrument refuses (a pickup over the frets, the hand past the last
fret) is said on the message line and changes nothing.
"""

from __future__ import annotations

from rtvoice.engine import Settings
from rtvoice.ui.app_parts import AppParts
from rtvoice.ui.fretting import Place, element_parameter, is_fretted, neck_picture
from rtvoice.ui.keyboard import OCTAVE_DOWN, OCTAVE_UP, STRINGS_DOWN, STRINGS_UP
from rtvoice.ui.screens.strings import StringsScreen
from rtvoice.ui.widgets.neck_view import NeckView
from rtvoice.ui.widgets.string_view import StringView, clamp_to_range

FRETTED_CLASS = "-fretted"  # the app's class on a fretted instrument: the neck takes room from the others
NECK_TITLE = "neck: saddle → nut (╳ pluck, ░ pickup aperture, ● sounding, ◉ the bars' note; tab: next)"


class InstrumentEditing(AppParts):
    """The neck view, the hand, the strings' table and the keyboard rows on a fretted instrument."""

    def _show_instrument(self, settings: Settings) -> None:
        """The neck view on a fretted instrument, the one-string view under the open rule; a view
        that goes away passes the focus to the one that comes."""
        fretted = is_fretted(settings)
        if fretted:
            self.neck_view.update_picture(neck_picture(settings, self.engine.places, self.neck_selected))
        if self.neck_view.display == fretted:
            return
        had_focus = self.focused in (self.neck_view, self.string_view)
        self.neck_view.display = fretted
        self.string_view.display = not fretted
        self.set_class(fretted, FRETTED_CLASS)
        if had_focus:
            (self.neck_view if fretted else self.string_view).focus()
        self.refresh_bindings()  # the strings' key is shown only on a fretted instrument

    # -- the neck view's requests ------------------------------------------------------------
    def on_neck_view_move_requested(self, message: NeckView.MoveRequested) -> None:
        """The pluck or a pickup ``delta_mm`` further from the saddle: its position moves by
        delta_mm / scale length (a pickup's slant stays, so both its ends move)."""
        name = element_parameter(message.element)
        if name is None or name == "hand.fret":
            return
        s = self.session.settings
        value = s.get(name) + message.delta_mm / s.get("string.scale_length_mm")
        self.change(name, clamp_to_range(name, value))

    def on_neck_view_hand_requested(self, message: NeckView.HandRequested) -> None:
        value = self.session.settings.get("hand.fret") + message.delta_frets
        self.change("hand.fret", clamp_to_range("hand.fret", value))

    def on_neck_view_select_requested(self, message: NeckView.SelectRequested) -> None:
        self.neck_selected = message.element
        name = element_parameter(message.element)
        if name is not None:
            self.params.select_name(name)
        s = self.session.settings
        self.neck_view.update_picture(neck_picture(s, self.engine.places, self.neck_selected))

    def selected_on_instrument(self) -> str | None:
        """The parameter the focused string or neck view has selected (what ctrl+l learns), or None."""
        if isinstance(self.focused, StringView):
            return self.focused.element.position_name
        if isinstance(self.focused, NeckView):
            return element_parameter(self.focused.selected)
        return None

    # -- the strings' table ------------------------------------------------------------------
    def action_strings(self) -> None:
        self.push_screen(StringsScreen(self.session.settings, self.ask_typed))

    def show_strings(self, settings: Settings) -> None:
        """Redraw an open strings' table from ``settings``."""
        for screen in self.screen_stack:
            if isinstance(screen, StringsScreen):
                screen.show_settings(settings)

    # -- the keyboard rows on the strings -------------------------------------------------------
    def play_string_key(self, char: str) -> bool:
        """A key on a fretted instrument: True when it meant something here (played, or moved the rows)."""
        s = self.session.settings
        if char in (STRINGS_DOWN, STRINGS_UP):
            self.player.move_strings(s, 1 if char == STRINGS_UP else -1)
        elif char in (OCTAVE_DOWN, OCTAVE_UP):
            self.player.move_frets(s, -1 if char == OCTAVE_DOWN else 1)
        else:
            key = self.player.string_key(char, s)
            if key is None:
                missing = self.player.missing_fret(char, s)
                if missing is None:
                    return False
                self.say_error(f"refused: the neck has frets 0..{s.get('instrument.frets')}, not {missing} "
                               f"({OCTAVE_DOWN} moves the keys back along the strings)")
                return True
            if self.engine.note_on(key.note, self.player.velocity, self.say_error, channel=key.channel):
                self.last_note = key.note
                self.last_place = Place(key.string, key.fret)
            return True
        words = self.player.rows_words(s)
        self.say(words)
        self._refresh_line()
        return True
