"""``rtvoice render`` with a second sound: the same notes into two WAV files that line up sample for sample.

Sound A is ``--preset`` plus ``--set``; sound B is ``--ab`` (or, without it, A's preset) plus
``--set-b``. Both are rendered from the same events at the same rate; the one that rings out
sooner is padded with silence, so the two files have the same length and can be laid one above
the other in any audio editor. Files go to ``OUT-A.wav`` and ``OUT-B.wav`` beside ``-o OUT.wav``,
or to ``-o`` and ``--output-b`` as given.

Nothing is written unless both files are whole: B is rendered and written while A's temporary
file is still open (so A can still be padded to B's length), and a failure anywhere removes both.
"""

from __future__ import annotations

import argparse
import hashlib
import math
import os
import sys
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rtvoice.engine import Settings, apply_assignments, load_preset
from rtvoice.offline.files import RenderError, write_blocks
from rtvoice.offline.options import output_path, preset_arg
from rtvoice.offline.render import PROGRESS_ABOVE_S, iter_blocks, text_progress

MAX_LISTED_DIFFERENCES = 8  # parameters named in the summary; the rest are counted


@dataclass(frozen=True)
class Take:
    """One of the two files: its label, its sound as the user named it, its settings and its path."""

    label: str
    sound: str
    settings: Settings
    out: Path


@dataclass(frozen=True)
class TakePair:
    a: Take
    b: Take
    differences: tuple[str, ...]  # parameter names whose values differ between A and B


@dataclass
class Tally:
    """What streamed into one file: frames (with padding), the take's own frames, peak and a digest."""

    frames: int = 0
    own_frames: int = 0
    peak: float = 0.0
    digest: hashlib._Hash = field(default_factory=hashlib.sha256)

    def counted(self, blocks: Iterable[np.ndarray]) -> Iterator[np.ndarray]:
        for block in blocks:
            # The digest is of the float32 samples the file holds, so equal digests mean equal files.
            self.digest.update(np.asarray(block, dtype=np.float32).tobytes())
            self.frames += len(block)
            yield block


def add_options(parser: argparse.ArgumentParser) -> None:
    """--ab, --set-b and --output-b on ``rtvoice render``."""
    group = parser.add_argument_group(
        "two sounds (A/B)",
        "render the same notes a second time with sound B into a second file of the same length; "
        "A is --preset plus --set, B is --ab (default: the same preset) plus --set-b",
    )
    group.add_argument("--ab", type=preset_arg, metavar="PRESET",
                       help="sound B: a preset name or a path to a .toml file; writes OUT-A.wav and OUT-B.wav")
    group.add_argument("--set-b", action="append", default=[], metavar="KEY=VALUE",
                       help="change one parameter of sound B (repeatable)")
    group.add_argument("--output-b", type=output_b_path, metavar="FILE",
                       help="B's file; -o is then A's file as given (default: OUT-A.wav and OUT-B.wav from -o)")


def output_b_path(text: str) -> str:
    """An argparse type for --output-b: as for -o, and a name too long for the file system is refused too."""
    try:
        return output_path(text)
    except OSError as err:
        raise argparse.ArgumentTypeError(f"cannot write {text}: {err.strerror or err}") from None


def plan_pair(args: argparse.Namespace, settings_a: Settings) -> TakePair | None:
    """The two takes of an A/B render, or None for a plain one.

    Everything the user can get wrong (B's preset, a ``--set-b``, either file name, the two
    names being one file) is checked here, before any sound is rendered.
    """
    if not (args.ab or args.set_b or args.output_b):
        return None
    preset_b = args.ab or args.preset
    base_b = load_preset(preset_b) if preset_b else Settings.defaults()
    settings_b = apply_assignments(base_b, args.set_b, source="--set-b")
    out_a, out_b = output_names(Path(args.output), args.output_b)
    for out in (out_a, out_b):
        _check_writable(out)
    if _same_file(out_a, out_b):
        raise RenderError(f"{out_a} and {out_b} are the same file: A and B need two different output files")
    differences = settings_a.differences(settings_b)
    if settings_a.controls != settings_b.controls:
        differences.append("[[control]] map")  # a MIDI file's controllers move other parameters
    return TakePair(
        Take("A", _describe(args.preset, args.set, "--set"), settings_a, out_a),
        Take("B", _describe(preset_b, args.set_b, "--set-b"), settings_b, out_b),
        tuple(differences),
    )


def output_names(out: Path, output_b: str | None) -> tuple[Path, Path]:
    """(A's file, B's file): ``-o`` and ``--output-b`` as given, or ``take.wav`` -> ``take-A.wav``, ``take-B.wav``."""
    if output_b:
        return out, Path(output_b)
    return out.with_name(f"{out.stem}-A{out.suffix}"), out.with_name(f"{out.stem}-B{out.suffix}")


def render_pair(pair: TakePair, events: Sequence[tuple[float, int, int, int]], args: argparse.Namespace) -> int:
    """Render and write both takes, print what each file holds; 0."""
    a, b = Tally(), Tally()
    b_in_place = False

    def a_then_b() -> Iterator[np.ndarray]:
        nonlocal b_in_place
        yield from a.counted(_take_blocks(pair.a, events, args))
        a.own_frames = a.frames
        # A has rung out but its file is still a temporary one. B is rendered and written now, padded to
        # A's length; then A is padded to B's, and write_blocks renames A into place. A failing B
        # removes B's temporary file and, through this generator, A's.
        b_blocks = _take_blocks(pair.b, events, args)
        b.peak = _write(pair.b.out, _padded(b, b_blocks, a.frames, args.block), args.rate)
        b_in_place = True
        yield from a.counted(_silence(b.frames - a.frames, args.block))

    try:
        a.peak = _write(pair.a.out, a_then_b(), args.rate)
    except BaseException:
        if b_in_place:  # A failed after B was renamed into place: leave neither
            _remove(pair.b.out)
        raise
    for take, tally in ((pair.a, a), (pair.b, b)):
        print(_summary(take, tally, args.rate))
    same_audio = a.frames == b.frames and a.digest.digest() == b.digest.digest()
    if not pair.differences:
        _warn("A and B are the same sound (no parameter differs): both files hold the same samples")
    elif same_audio:
        _warn(f"A and B differ only in {_listed(pair.differences)}, which does not change these notes: "
              "both files hold the same samples")
    else:
        print(f"B differs from A in {_listed(pair.differences)}")
    return 0


def _take_blocks(take: Take, events, args: argparse.Namespace) -> Iterator[np.ndarray]:
    """The take's blocks, exactly as a plain ``rtvoice render`` of its sound makes them."""
    length_s = events[-1][0] if events else 0.0
    long_on_a_terminal = length_s > PROGRESS_ABOVE_S and sys.stderr.isatty()
    progress = text_progress(f"rendering {take.out.name} ({take.label})") if long_on_a_terminal else None
    return iter_blocks(events, take.settings, args.rate, args.block, args.tail_cap, progress)


def _padded(tally: Tally, blocks: Iterable[np.ndarray], to_frames: int, block: int) -> Iterator[np.ndarray]:
    yield from tally.counted(blocks)
    tally.own_frames = tally.frames
    yield from tally.counted(_silence(to_frames - tally.frames, block))


def _silence(frames: int, block: int) -> Iterator[np.ndarray]:
    while frames > 0:
        n = min(block, frames)
        yield np.zeros(n, dtype=np.float32)
        frames -= n


def _write(out: Path, blocks: Iterable[np.ndarray], rate: int) -> float:
    """write_blocks, with a temporary file that cannot even be made reported as one line too; the peak."""
    try:
        _, peak = write_blocks(out, blocks, rate)
    except OSError as err:  # mkstemp's: e.g. a name the file system finds too long once the temporary suffix is on
        raise RenderError(f"cannot write {out}: {err.strerror or err}") from None
    return peak


def _check_writable(out: Path) -> None:
    """A file name for a derived or given output: not a folder, in an existing folder we may write to."""
    try:
        output_path(str(out))
    except argparse.ArgumentTypeError as err:
        raise RenderError(str(err)) from None
    except OSError as err:
        raise RenderError(f"cannot write {out}: {err.strerror or err}") from None
    folder = out.parent if str(out.parent) else Path(".")
    if not os.access(folder, os.W_OK):
        raise RenderError(f"cannot write {out}: the folder {folder} is not writable")


def _same_file(one: Path, other: Path) -> bool:
    if os.path.realpath(one) == os.path.realpath(other):
        return True
    try:
        return os.path.samefile(one, other)  # hard links to one file
    except OSError:
        return False  # one of them does not exist yet


def _describe(preset: str | None, assignments: Sequence[str], option: str) -> str:
    parts = [f"preset {preset}" if preset else "the default sound"]
    parts += [f"{option} {text}" for text in assignments]
    return ", ".join(parts)


def _summary(take: Take, tally: Tally, rate: int) -> str:
    peak_db = 20 * math.log10(tally.peak) if tally.peak > 0 else float("-inf")
    padding = tally.frames - tally.own_frames
    length = f"{tally.frames / rate:.2f} s"
    if padding:
        length += f", the last {padding / rate:.2f} s silence added to line up"
    return f"wrote {take.out}: {take.label} = {take.sound} ({length}, peak {peak_db:.1f} dBFS)"


def _listed(names: Sequence[str]) -> str:
    shown = ", ".join(names[:MAX_LISTED_DIFFERENCES])
    more = len(names) - MAX_LISTED_DIFFERENCES
    return shown + (f" and {more} more" if more > 0 else "")


def _warn(message: str) -> None:
    sys.stderr.write(f"rtvoice render: warning: {message}\n")


def _remove(path: Path) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass
