"""The ``rtvoice`` command: a thin dispatcher over the subcommands.

Each subcommand lives with the layer it drives and registers itself through a
``register(subparsers)`` function; this module only wires them together and turns
expected errors into one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import difflib
import importlib
import sys
import warnings
from typing import NoReturn

from rtvoice.commands import MODULES as COMMAND_MODULES  # in the order ``--help`` lists them

EXIT_BAD_INPUT = 2


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose errors are one line, exit status 2, with a suggestion for a typing mistake."""

    def error(self, message: str) -> NoReturn:
        sys.stderr.write(f"{self.prog}: error: {message} (see {self.prog} --help)\n")
        raise SystemExit(EXIT_BAD_INPUT)

    def _check_value(self, action: argparse.Action, value) -> None:
        """argparse's choice check, naming the closest choice: ``rendr`` -> did you mean 'render'?"""
        try:
            super()._check_value(action, value)
        except argparse.ArgumentError as err:
            choices = list(action.choices or ())
            close = difflib.get_close_matches(str(value), [str(c) for c in choices], n=1)
            if not close:
                raise
            raise argparse.ArgumentError(action, f"invalid choice: {value!r}; did you mean {close[0]!r}? "
                                                 f"(choose from {', '.join(map(repr, choices))})") from err

    def parse_known_args(self, args=None, namespace=None):
        if self._subparsers is None:  # a command's own parser: it knows every option the command takes
            self._refuse_mistyped_option(sys.argv[1:] if args is None else list(args))
        return super().parse_known_args(args, namespace)

    def _refuse_mistyped_option(self, args: list[str]) -> None:
        """Refuse an unknown long option by name, with the closest known one (``--prset`` -> ``--preset``).

        Checked before argparse reads the line: left to it, the option's value could be
        taken for a positional and the error would name something else.
        """
        known = [o for o in self._option_string_actions if o.startswith("--")]
        for token in args:
            if token == "--":  # what follows is positional
                return
            if not token.startswith("--") or " " in token:  # argparse reads a token with a space as a value
                continue
            option = token.split("=", 1)[0]
            if option in self._option_string_actions or any(k.startswith(option) for k in known):
                continue  # known, or an abbreviation argparse resolves (or calls ambiguous)
            close = difflib.get_close_matches(option, known, n=1)
            self.error(f"unrecognized option {option}" + (f"; did you mean {close[0]}?" if close else ""))


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(prog="rtvoice", description="A plucked-string instrument computed from string modes.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def _command_names(parser: argparse.ArgumentParser) -> list[str]:
    """The subcommands :func:`build_parser` registered, from argparse's subparsers action."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return list(action.choices)
    return []


def _one_line_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings meant for the user (e.g. a preset from a newer version) as one line, without source lines."""
    (file or sys.stderr).write(f"rtvoice: warning: {message}\n")


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    warnings.showwarning = _one_line_warning
    parser = build_parser()
    commands = _command_names(parser)
    if "play" in commands and (not argv or (argv[0].startswith("-") and argv[0] not in ("-h", "--help"))):
        argv = ["play", *argv]  # plain rtvoice is rtvoice play, options and all (rtvoice --preset NAME)
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
