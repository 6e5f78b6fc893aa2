"""Writing a render to a WAV file whole or not at all, and the error a refused render raises."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from rtvoice.errors import UserError
from rtvoice.offline.wav import WavStreamWriter

#: A RIFF/WAVE file counts its data in a 32-bit field: at most 4 GiB of float32 samples, less the header.
WAV_MAX_FRAMES = (2**32 - 1 - 64) // 4
WRITE_EVERY_FRAMES = 1 << 16  # gather this much audio per write: fewer header rewrites


class RenderError(UserError, ValueError):
    """A render the command line refuses before starting (output place, length); ``source``: the file."""


def write_blocks(out: Path, blocks: Iterable[np.ndarray], rate: int) -> tuple[int, float]:
    """Stream ``blocks`` into a float32 WAV beside ``out``, then rename it into place; (frames, peak).

    Memory stays a few blocks for any length, and ``out`` appears only when the
    render is whole: a failure or Ctrl-C removes the temporary file.
    """
    folder = out.parent if str(out.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".tmp", dir=folder)
    os.close(fd)
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(tmp, 0o666 & ~mask)  # mkstemp makes 0600; a rendered WAV is an ordinary file
    frames, peak, pending, held = 0, 0.0, [], 0
    try:
        with WavStreamWriter(tmp, rate) as writer:
            for block in blocks:
                pending.append(block.astype(np.float32))
                held += len(block)
                if held >= WRITE_EVERY_FRAMES:
                    chunk = np.concatenate(pending)
                    writer.write(chunk)
                    peak = max(peak, float(np.max(np.abs(chunk))))
                    frames, pending, held = frames + held, [], 0
            if pending:
                chunk = np.concatenate(pending)
                writer.write(chunk)
                peak = max(peak, float(np.max(np.abs(chunk))))
                frames += held
        os.replace(tmp, out)
    except OSError as err:
        _remove(tmp)
        raise RenderError(f"cannot write {out}: {err.strerror or err}") from None
    except BaseException:
        _remove(tmp)
        raise
    return frames, peak


def _remove(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass
