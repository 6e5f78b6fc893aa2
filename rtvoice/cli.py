"""The ``rtvoice`` command: a thin dispatcher over the subcommands.

Each subcommand lives with the layer it drives and registers itself through a
``register(subparsers)`` function; this module only wires them together and turns
expected errors into one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings

#: Modules that add subcommands, in the order ``--help`` lists them.
COMMAND_MODULES = [
    "rtvoice.offline.commands",
    "rtvoice.host.commands",
    "rtvoice.bench.commands",
    "rtvoice.survey.commands",
]

EXIT_BAD_INPUT = 2


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose errors are one line, exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"{self.prog}: error: {message} (see {self.prog} --help)\n")
        raise SystemExit(EXIT_BAD_INPUT)


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(prog="rtvoice", description="A plucked-string instrument computed from string modes.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def _one_line_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings meant for the user (e.g. a preset from a newer version) as one line, without source lines."""
    (file or sys.stderr).write(f"rtvoice: warning: {message}\n")


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    warnings.showwarning = _one_line_warning
    parser = build_parser()
    if not argv and "play" in parser._subparsers._group_actions[0].choices:  # plain rtvoice opens the UI
        argv = ["play"]
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    from rtvoice.errors import UserError

    try:
        return int(args.func(args) or 0)
    except UserError as err:
        sys.stderr.write(f"rtvoice {args.command}: error: {err}\n")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
