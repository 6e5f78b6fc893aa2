"""Argument types shared by the commands that read a preset or write a file (argparse ``type=``)."""

from __future__ import annotations

import argparse
import os
from pathlib import Path


def preset_arg(text: str) -> str:
    """An argparse type for --preset: a name or a path, not blank (blank would silently mean the defaults)."""
    if not text.strip():
        raise argparse.ArgumentTypeError("expected a preset name or a path to a .toml file, got an empty one")
    return text


def output_path(text: str) -> str:
    """An argparse type for a file to write: a name in an existing folder, not a folder itself."""
    if not text or not text.strip():
        raise argparse.ArgumentTypeError("expected a file name, got an empty one")
    if "\0" in text:
        raise argparse.ArgumentTypeError(f"{text!r} is not a usable file name")
    path = Path(text)
    try:
        if path.is_dir() or text.endswith(("/", os.sep)):
            raise argparse.ArgumentTypeError(f"{text} is a folder: give a file name inside it")
        folder = path.parent if str(path.parent) else Path(".")
        if not folder.is_dir():
            raise argparse.ArgumentTypeError(f"{folder}: no such folder for the output file")
    except OSError as err:  # a name the system refuses outright (too long, say)
        raise argparse.ArgumentTypeError(f"{text[:60]}...: not a usable file name ({err.strerror})") from None
    return text


def whole_number(text: str, what: str) -> int:
    """An argparse type's body: ``text`` as a whole number, 0 or more; ``what`` names it in the error."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected {what}, got {value}")
    return value
