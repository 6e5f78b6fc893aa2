"""Reading a recorded take (any common WAV) and refusing what no fit can use.

The WAV layout (RIFF 'WAVE', a 'fmt ' chunk with format tag 1 = PCM or 3 = IEEE float, channels,
rate, bits per sample, then 'data' with interleaved little-endian frames; 8-bit PCM unsigned,
wider PCM signed) is the one of the Microsoft/IBM "Multimedia Programming Interface and Data
Specifications 1.0" (1991); the files here are written byte by byte from it, not by the code
under test, except where scipy's writer (a general-purpose reference library) is named.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile

from rtvoice.fit.take import Take, TakeError, check_take, read_take

RATE = 48000


def _wav_bytes(frames: np.ndarray, rate: int, bits: int, fmt_tag: int = 1) -> bytes:
    """A canonical WAV of integer codes (or float values for tag 3), frames x channels."""
    frames = np.atleast_2d(frames.T).T if frames.ndim == 1 else frames
    channels = frames.shape[1]
    width = bits // 8
    if fmt_tag == 3:
        data = frames.astype("<f4" if bits == 32 else "<f8").tobytes()
    elif bits == 8:
        data = frames.astype(np.uint8).tobytes()
    elif bits == 24:
        codes = frames.astype("<i4").reshape(-1)
        data = b"".join(int(c).to_bytes(3, "little", signed=True) for c in codes)
    else:
        data = frames.astype(f"<i{width}").tobytes()
    fmt = struct.pack("<HHIIHH", fmt_tag, channels, rate, rate * channels * width, channels * width, bits)
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt + b"data" + struct.pack("<I", len(data)) + data
    return b"RIFF" + struct.pack("<I", len(body)) + body


def _write(tmp_path: Path, name: str, payload: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(payload)
    return path


def _tone(seconds: float = 0.5, amplitude: float = 0.5, rate: int = RATE) -> np.ndarray:
    t = np.arange(int(seconds * rate)) / rate
    return amplitude * np.exp(-2.0 * t) * np.sin(2 * np.pi * 220.0 * t)


@pytest.mark.parametrize(("bits", "scale"), [(16, 2**15), (24, 2**23), (32, 2**31)])
def test_pcm_reads_at_full_scale_one(tmp_path, bits, scale):
    # Signed PCM codes c read as c / 2^(bits-1): -2^(bits-1) is -1.0 exactly (WAV spec: two's complement).
    codes = np.array([0, 1, -1, scale // 2, -scale, scale - 1], dtype=np.int64)
    take = read_take(_write(tmp_path, f"p{bits}.wav", _wav_bytes(codes, RATE, bits)))
    assert take.sample_rate_hz == RATE
    assert take.samples.dtype == np.float64
    np.testing.assert_allclose(take.samples, codes / scale, rtol=0, atol=1e-12)
    assert take.samples[4] == -1.0


def test_eight_bit_is_unsigned_about_128(tmp_path):
    # 8-bit WAV samples are unsigned, 128 the zero line (WAV spec).
    codes = np.array([128, 255, 0, 192], dtype=np.int64)
    take = read_take(_write(tmp_path, "p8.wav", _wav_bytes(codes, RATE, 8)))
    np.testing.assert_allclose(take.samples, [0.0, 127 / 128, -1.0, 0.5])


@pytest.mark.parametrize("bits", [32, 64])
def test_float_reads_as_is(tmp_path, bits):
    values = np.array([0.0, 0.25, -0.75, 1.0 / 3.0])
    take = read_take(_write(tmp_path, f"f{bits}.wav", _wav_bytes(values, RATE, bits, fmt_tag=3)))
    tol = 1e-7 if bits == 32 else 0.0
    np.testing.assert_allclose(take.samples, values, rtol=tol, atol=tol)


def test_first_channel_of_a_stereo_file(tmp_path):
    left, right = np.array([100, 200, 300]), np.array([-5, -6, -7])
    take = read_take(_write(tmp_path, "st.wav", _wav_bytes(np.column_stack([left, right]), 44100, 16)))
    np.testing.assert_allclose(take.samples, left / 2**15)
    assert take.sample_rate_hz == 44100


def test_scipy_written_file_round_trips(tmp_path):
    # scipy.io.wavfile.write as an independent writer of 16-bit PCM.
    x = _tone()
    path = tmp_path / "scipy.wav"
    scipy.io.wavfile.write(path, RATE, np.round(x * 32767).astype(np.int16))
    take = read_take(path)
    check_take(take)
    np.testing.assert_allclose(take.samples, np.round(x * 32767) / 32768, atol=1e-12)
    assert take.source == str(path)


def _refusal(take_or_path, tmp_path: Path | None = None) -> str:
    with pytest.raises(TakeError) as info:
        take = read_take(take_or_path) if isinstance(take_or_path, Path) else take_or_path
        check_take(take)
    message = str(info.value)
    assert "\n" not in message and message  # one line a user can act on
    return message


def test_text_file_named_wav(tmp_path):
    path = _write(tmp_path, "notes.wav", b"this is a text file, not audio\n")
    assert "not a WAV" in _refusal(path)


def test_missing_file(tmp_path):
    assert "no such file" in _refusal(tmp_path / "absent.wav")


def test_empty_wav(tmp_path):
    path = _write(tmp_path, "empty.wav", _wav_bytes(np.zeros(0, dtype=np.int64), RATE, 16))
    assert "no samples" in _refusal(path)


def test_all_zero_wav_is_silent(tmp_path):
    path = _write(tmp_path, "zero.wav", _wav_bytes(np.zeros(RATE, dtype=np.int64), RATE, 16))
    assert "silent" in _refusal(path)


def test_clipped_pcm_take(tmp_path):
    x = np.clip(4.0 * _tone(), -1.0, 1.0)  # a take recorded 12 dB too hot: flat tops at full scale
    codes = np.clip(np.round(x * 32768), -32768, 32767)
    assert "clips" in _refusal(_write(tmp_path, "hot.wav", _wav_bytes(codes, RATE, 16)))


def test_clipped_float_take():
    x = 3.0 * _tone()  # float files hold values over 1.0: those are clipped on any converter
    assert "clips" in _refusal(Take(x, RATE, "float take"))


def test_one_sample_at_full_scale_is_not_clipping(tmp_path):
    codes = np.round(_tone() * 20000)
    codes[1000] = 32767  # a single peak reaching full scale: not a flat top
    check_take(read_take(_write(tmp_path, "peak.wav", _wav_bytes(codes, RATE, 16))))


def test_rate_below_16_khz(tmp_path):
    x = _tone(rate=8000)
    path = _write(tmp_path, "slow.wav", _wav_bytes(np.round(x * 20000), 8000, 16))
    assert "8000 Hz" in _refusal(path)


def test_too_short_for_the_decay(tmp_path):
    x = _tone(seconds=0.1)
    path = _write(tmp_path, "short.wav", _wav_bytes(np.round(x * 20000), RATE, 16))
    assert "too short" in _refusal(path)


def test_not_a_number_in_a_float_take():
    x = _tone()
    x[100] = np.nan
    assert "not numbers" in _refusal(Take(x, RATE, "nan take"))


def test_a_good_take_passes(tmp_path):
    path = _write(tmp_path, "good.wav", _wav_bytes(np.round(_tone() * 20000), RATE, 24))
    check_take(read_take(path))
