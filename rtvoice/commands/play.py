"""``rtvoice play`` and ``rtvoice devices``."""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

from rtvoice.host.errors import HostError
from rtvoice.host.link import DEFAULT_CLIENT_NAME, EngineLink
from rtvoice.host.options import MPE_HELP, parse_mpe

#: JACK limits client names to jack_client_name_size() - 1 = 63 bytes (JACK 1.9 / 2 headers, common practice);
#: a ':' would split "client:port" names.
MAX_CLIENT_NAME_BYTES = 63


def register(sub: argparse._SubParsersAction) -> None:
    from rtvoice.commands.render import add_sound_options
    from rtvoice.offline.options import output_path

    p = sub.add_parser("play", help="play in real time from MIDI (the terminal UI unless --headless)")
    p.add_argument("--headless", action="store_true", help="no UI: a status line on stderr once a second")
    add_sound_options(p)
    _follow_the_output_rate(p)
    p.add_argument("--audio-device", metavar="NAME|none", default=None, type=_not_blank("--audio-device"),
                   help="audio output (part of its name, or its number from 'rtvoice devices'); "
                        "none runs on a silent clock")
    p.add_argument("--midi-in", metavar="NAME|all|virtual|none", default="all", type=_not_blank("--midi-in"),
                   help="all: every hardware input plus a virtual port (default); virtual: only the virtual "
                        "port; NAME: inputs whose name contains NAME")
    p.add_argument("--record", metavar="OUT.wav", type=output_path,
                   help="write what is played to a 32-bit float WAV file")
    p.add_argument("--mpe", metavar="ZONES", type=_mpe,
                   help=f"MPE zones without waiting for a configuration message: {MPE_HELP}")
    p.add_argument("--client-name", default=DEFAULT_CLIENT_NAME, metavar="NAME", type=_client_name,
                   help=f"name of the audio and MIDI clients, e.g. on JACK (default {DEFAULT_CLIENT_NAME})")
    p.add_argument("--duration", type=_duration, metavar="SECONDS", help="stop after this long (headless)")
    p.set_defaults(func=run_play)

    d = sub.add_parser("devices", help="list audio outputs and MIDI inputs, and which are used by default")
    d.set_defaults(func=run_devices)


def _follow_the_output_rate(p: argparse.ArgumentParser) -> None:
    """Playing live, --rate defaults to the output's own rate (a JACK server's, a device's)."""
    for action in p._actions:
        if action.dest == "rate":
            action.default = None
            action.help = ("sample rate in Hz (default: the audio server's or device's own rate; "
                           "48000 on the silent clock)")


def _not_blank(option: str):
    def parse(text: str) -> str:
        if not text.strip():
            raise argparse.ArgumentTypeError(f"{option} needs a name, a number or a keyword, got an empty one")
        return text

    return parse


def _client_name(text: str) -> str:
    if not text.strip():
        raise argparse.ArgumentTypeError("the client name must not be empty")
    if len(text.encode("utf-8")) > MAX_CLIENT_NAME_BYTES:
        raise argparse.ArgumentTypeError(f"the client name may be at most {MAX_CLIENT_NAME_BYTES} bytes long")
    if ":" in text or any(ord(c) < 32 for c in text):
        raise argparse.ArgumentTypeError(f"the client name {text!r} may not contain ':' or control characters")
    return text


def _mpe(text: str) -> str:
    try:
        parse_mpe(text)
    except HostError as err:
        raise argparse.ArgumentTypeError(str(err)) from None
    return text


def _duration(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"duration must be a number of seconds, got {text!r}") from None
    if not 0 < value <= 7 * 24 * 3600:
        raise argparse.ArgumentTypeError(f"duration must be between 0 and one week, got {text}")
    return value


def make_link(args: argparse.Namespace, engine_log: str | None = None) -> EngineLink:
    from rtvoice.commands.render import settings_from_args

    settings = settings_from_args(args)
    return EngineLink(settings, audio_device=args.audio_device, rate=args.rate, block=args.block,
                      midi_in=args.midi_in, record=args.record, client_name=args.client_name, mpe=args.mpe,
                      engine_log=engine_log)


def engine_log_path() -> str:
    """Where the engine process writes what its libraries print while a UI owns the terminal."""
    try:
        import platformdirs

        folder = Path(platformdirs.user_log_dir("rtvoice", appauthor=False))
        folder.mkdir(parents=True, exist_ok=True)
    except (ImportError, OSError):
        folder = Path(tempfile.gettempdir())
    return str(folder / "engine.log")


def run_play(args: argparse.Namespace) -> int:
    try:
        link = make_link(args, None if args.headless else engine_log_path())
        if args.headless:
            from rtvoice.host.headless import run_headless

            return run_headless(link, args.duration)
        try:
            from rtvoice.ui.app import run_ui
        except ImportError as err:
            if "rtvoice.ui" not in str(err) and "textual" not in str(err):
                raise
            sys.stderr.write("rtvoice play: the terminal UI is not available "
                             f"({err}); run 'rtvoice play --headless' instead\n")
            return 2
        link.start()
        try:
            return int(run_ui(link, args) or 0)
        finally:
            link.close()
    except HostError as err:
        sys.stderr.write(f"rtvoice play: error: {err}\n")
        return 2


def run_devices(args: argparse.Namespace) -> int:
    from rtvoice.host.devices import device_report

    sys.stdout.write(device_report())
    return 0
