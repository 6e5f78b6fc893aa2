"""What the app's mixins share: the attributes :class:`rtvoice.ui.app.RtvoiceApp` sets and the
methods one mixin calls on another, declared once so that each mixin's use of them is checked.

The app is put together from mixins (:mod:`rtvoice.ui.keeping`, :mod:`rtvoice.ui.live_picture`,
:mod:`rtvoice.ui.sound_editing`, :mod:`rtvoice.ui.preset_actions`) that read the app's state and
call each other. To the type checker their common base is a Textual ``App[int]`` with these
declarations, so ``push_screen`` and the rest are checked too; at run time it is an empty class
(annotations only), and the app's own classes supply everything.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from concurrent.futures import Executor

    import numpy as np
    from textual.app import App
    from textual.widgets import ContentSwitcher

    from rtvoice.engine import Settings
    from rtvoice.host.link import Snapshot
    from rtvoice.host.messages import Notice
    from rtvoice.ui.compare import SlotComparison
    from rtvoice.ui.fretting import Place
    from rtvoice.ui.keyboard import KeyboardPlayer
    from rtvoice.ui.session import SoundSession
    from rtvoice.ui.sync import EngineView
    from rtvoice.ui.widgets.bars import HarmonicBars
    from rtvoice.ui.widgets.compare_view import CompareView
    from rtvoice.ui.widgets.meters import Meters
    from rtvoice.ui.widgets.neck_view import NeckView
    from rtvoice.ui.widgets.params import ParamTable
    from rtvoice.ui.widgets.spectrum import SpectrumView
    from rtvoice.ui.widgets.status import MessageLine, SoundLine
    from rtvoice.ui.widgets.string_view import StringView

    _AppBase = App[int]
else:
    _AppBase = object

#: The cache keys of the predicted bars and the A/B comparison (see :mod:`rtvoice.ui.live_picture`):
#: ids of the settings, the note, its place on a fretted instrument, (the rounded f0 in Hz,)
#: harmonics shown, velocity.
PredictedKey = tuple[int, int, "Place | None", float | None, int, int]
ComparedKey = tuple[int, int, int, "Place | None", int, int]


class AppParts(_AppBase):
    """The app's state and cross-mixin methods, as the mixins may use them."""

    # Set in RtvoiceApp.__init__.
    link: Any  # a started rtvoice.host.link.EngineLink, or anything with its methods
    session: SoundSession
    engine: EngineView
    player: KeyboardPlayer
    spawner: Executor | None
    sample_rate_hz: float
    frame_rate_hz: float
    safety_note: bool | None
    view: str  # one of rtvoice.ui.app.VIEWS
    learning: str | None  # the parameter waiting for a controller to move, if any
    last_note: int
    last_place: Place | None  # fretted: where the last note the bars followed sounded
    neck_selected: str  # the neck view's element the keys move ("pluck", "hand", "pickup 1", ...)
    frames: int
    _predicted_key: PredictedKey | None
    _predicted: np.ndarray
    _compared_key: ComparedKey | None
    _compared: SlotComparison | None
    _snap: Snapshot | None
    _engine_down_said: bool
    _quit_asked: bool
    _restarting: bool
    _xrun_seen: tuple[int, int, float]  # xruns and late callbacks last explained, and when (s of UI time)

    # Set in RtvoiceApp.compose.
    sound_line: SoundLine
    views: ContentSwitcher
    bars: HarmonicBars
    spectrum: SpectrumView
    compare: CompareView
    string_view: StringView
    neck_view: NeckView
    params: ParamTable
    meters: Meters
    message_line: MessageLine

    if TYPE_CHECKING:  # defined by the app or by one of its mixins; declared here for the others
        def say(self, text: str) -> None: ...

        def say_error(self, text: str) -> None: ...

        def report_unexpected(self, err: BaseException, where: str) -> None: ...

        def sound_restored(self, what: str) -> None: ...

        def _use_sound(self, what: str) -> None: ...

        def _refresh_sound(self) -> None: ...

        def _refresh_line(self, note: int = -1) -> None: ...

        def _show_instrument(self, settings: Settings) -> None: ...

        def show_strings(self, settings: Settings) -> None: ...

        def change(self, name: str, value: Any) -> bool: ...

        def ask_typed(self, name: str) -> None: ...

        def _engine_message(self, msg: Notice) -> None: ...
