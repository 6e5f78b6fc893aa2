"""A recorded note read from a WAV file, and the checks that say whether it can be fitted.

A take is one channel of samples (the first, for a multi-channel file) in the file's own units
scaled to full scale 1.0, its sample rate and where it came from. :func:`check_take` refuses, in
one line a user can act on, what no fit can use: an empty or silent file, a take that clips, a
rate below 16 kHz, or one too short to show the note's decay.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.io.wavfile

from rtvoice.errors import UserError

MIN_RATE_HZ = 16000
MIN_DURATION_S = 0.3  # the onset, the filters' settling and a stretch of decay
SILENT_BELOW = 10.0 ** (-80.0 / 20.0)  # peak under -80 dBFS: nothing a pickup would give
CLIP_RUN = 3  # consecutive samples at full scale: one alone can be a legitimate peak (common practice)
#: Integer PCM counts as at full scale within one 16-bit step of it, whatever its depth (the reader
#: left-justifies 24- and 32-bit samples in int32); 8-bit within its own step; float at 1.0.
PCM_CLIP_LEVEL = 1.0 - 2.0**-15
PCM8_CLIP_LEVEL = 1.0 - 2.0**-7


class TakeError(UserError):
    """A take that cannot be fitted: not a WAV, empty, silent, clipped, too slow a rate, too short,
    no single note, or a fit that does not converge."""


@dataclass(frozen=True)
class Take:
    """One recorded channel: ``samples`` (float64, full scale 1.0), ``sample_rate_hz``, ``source``
    (the file, or a description of where the samples came from), and ``clip_level``, the magnitude
    at which a sample stands at the source format's full scale."""

    samples: np.ndarray
    sample_rate_hz: int
    source: str
    clip_level: float = 1.0

    @property
    def duration_s(self) -> float:
        return len(self.samples) / self.sample_rate_hz if self.sample_rate_hz > 0 else 0.0


def _to_float(data: np.ndarray) -> tuple[np.ndarray, float]:
    """Samples scaled to full scale 1.0, and the level that counts as full scale for clipping."""
    if data.dtype.kind == "f":
        return data.astype(np.float64), 1.0
    if data.dtype == np.uint8:  # 8-bit WAV is unsigned, centred on 128
        return (data.astype(np.float64) - 128.0) / 128.0, PCM8_CLIP_LEVEL
    if data.dtype.kind == "i":
        scale = float(2 ** (8 * data.dtype.itemsize - 1))
        return data.astype(np.float64) / scale, PCM_CLIP_LEVEL
    raise TakeError(f"samples of type {data.dtype} are not audio a WAV file holds")


def read_take(path: Path | str) -> Take:
    """The first channel of the WAV file at ``path`` (8/16/24/32-bit PCM or 32/64-bit float).

    Raises :class:`TakeError` when the file is missing or is not a WAV file it can read."""
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise TakeError("no such file", source=source)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # unknown chunks (cue points, text) do not matter here
            rate, data = scipy.io.wavfile.read(path)
    except (ValueError, EOFError, OSError, IndexError, KeyError, TypeError) as err:
        first_line = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise TakeError(f"not a WAV file this can read ({first_line})", source=source,
                        allowed="PCM 8/16/24/32-bit or float 32/64-bit WAV") from None
    data = np.asarray(data)
    if data.ndim == 2:
        data = data[:, 0]
    samples, clip_level = _to_float(data.reshape(-1))
    return Take(samples=samples, sample_rate_hz=int(rate), source=source, clip_level=clip_level)


def _longest_run(mask: np.ndarray) -> int:
    """Length of the longest run of True in ``mask``."""
    if not mask.any():
        return 0
    edges = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    return int((ends - starts).max())


def check_take(take: Take) -> None:
    """Raise :class:`TakeError` unless ``take`` can be fitted: samples present and finite, a rate of
    at least 16 kHz, at least 0.3 s long, a peak above -80 dBFS, and no run of samples at full scale
    (clipping)."""
    x, source = take.samples, take.source
    if x.size == 0:
        raise TakeError("the file holds no samples", source=source)
    if take.sample_rate_hz < MIN_RATE_HZ:
        raise TakeError(f"sample rate {take.sample_rate_hz} Hz is too low to fit",
                        source=source, allowed=f"at least {MIN_RATE_HZ} Hz")
    if not np.all(np.isfinite(x)):
        raise TakeError("the take holds samples that are not numbers (NaN or infinite)", source=source)
    if take.duration_s < MIN_DURATION_S:
        raise TakeError(f"{take.duration_s:.2f} s is too short to show the note's decay", source=source,
                        allowed=f"at least {MIN_DURATION_S:g} s")
    peak = float(np.max(np.abs(x)))
    if peak < SILENT_BELOW:
        raise TakeError("the take is silent (its peak is below -80 dBFS)", source=source)
    run = _longest_run(np.abs(x) >= take.clip_level)
    if run >= CLIP_RUN:
        raise TakeError(f"the take clips ({run} samples in a row at full scale): record it again "
                        f"with less gain", source=source)
