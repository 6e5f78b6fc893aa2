"""The app's side of surviving errors: report them, keep the unsaved sound when the program
ends on one anyway, and offer that sound back at the next start (see :mod:`rtvoice.ui.guard`
and :mod:`rtvoice.ui.recovery`)."""

from __future__ import annotations

from pathlib import Path

from rtvoice.ui import recovery
from rtvoice.ui.app_parts import AppParts
from rtvoice.ui.guard import Guarded, log_error
from rtvoice.ui.screens.dialogs import AskScreen


class AppGuard(Guarded, AppParts):
    """The app's side: report survived errors on the message line, keep the unsaved sound when the
    program ends on one anyway, and offer it back at the next start.

    Expects the app to have ``session`` (:class:`rtvoice.ui.session.SoundSession`), ``say_error`` and
    ``push_screen`` (declared in :mod:`rtvoice.ui.app_parts`)."""

    errors_survived = 0
    kept_at: Path | None = None  # where the unsaved sound was written when the UI ended on an error

    def report_unexpected(self, err: BaseException, where: str) -> None:
        self.errors_survived += 1
        path = log_error(err, where)
        detail = f" (details in {path})" if path else ""
        self.say_error(f"error: {type(err).__name__}: {err} in {where}; the sound goes on{detail}")

    def keep_unsaved(self) -> Path | None:
        """Write the unsaved slots for the next start (see :mod:`rtvoice.ui.recovery`)."""

        session = getattr(self, "session", None)
        if session is None:
            return None
        slots = [recovery.KeptSlot(name, s.settings, s.preset, s.origin, s.path)
                 for name in session.unsaved_slots() for s in (session.slots[name],)]
        self.kept_at = recovery.keep(slots)
        return self.kept_at

    def _handle_exception(self, error: Exception) -> None:
        """Textual's last resort (the program ends, exit status 1): log it and keep the sound first."""
        try:
            log_error(error, "the UI (fatal)")
            self.keep_unsaved()
        finally:
            super()._handle_exception(error)

    def offer_kept_sound(self) -> None:
        """Ask whether to take back the sound an earlier run kept when it ended on an error."""

        slots, written = recovery.kept()
        if not slots:
            return
        names = " and ".join(f"slot {s.slot}" for s in slots)
        what = ", ".join(f"{s.slot}: {s.preset or 'unsaved sound'}" for s in slots)

        def done(yes: bool | None) -> None:
            if yes:
                for s in slots:
                    self.session.restore(s.slot, s.settings, s.preset, s.origin, s.path)
                recovery.forget()
                self.sound_restored(f"took back the unsaved sound of {names}")
            else:
                aside = recovery.set_aside()
                self.say_error(f"warning: the kept sound was not loaded; it stays in {aside}")

        question = (f"rtvoice ended on an error ({written}) with unsaved changes in {names} ({what}). "
                    "Take them back?")
        self.push_screen(AskScreen(question, "take back", "leave on disk"), done)
