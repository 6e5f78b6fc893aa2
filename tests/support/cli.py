"""The real command line, run in the test's own process."""

from __future__ import annotations

import pytest

from rtvoice.cli import main


def run_cli(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    """``rtvoice ARGV`` here: (exit status, stdout, stderr); any other exception fails the test."""
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return int(code or 0), out, err
