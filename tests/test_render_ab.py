"""`rtvoice render` with a second sound (--ab, --set-b, --output-b), run as a user runs it, on real files.

The two files must come from the same events, line up sample for sample, and each must hold exactly
what a plain `rtvoice render` of its sound writes (renders are deterministic; README, "Use").
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import mido
import numpy as np
import pytest
import scipy.io.wavfile
from analysis import db, peak_frequency_hz
from support.cli import run_cli
from support.describe import failing
from support.mounts import mount_tmpfs, unmount

ROOT = Path(__file__).resolve().parents[1]
NOTE = ["--note", "40", "--seconds", "0.5"]
#: MIDI note 40 (E2) in 12-tone equal temperament with A4 = 440 Hz: 440 * 2^((40 - 69) / 12)
#: (MIDI 1.0 Detailed Specification, note numbers; common practice).
E2_HZ = 440.0 * 2 ** ((40 - 69) / 12)
#: A harmonic whose node sits under the pickup measures about -100 dB here (rounding of a vanishing sine
#: and the window's leakage); every sounding one is within 20 dB of the strongest.
SILENT_BELOW_DB = -60.0
SOUNDING_ABOVE_DB = -30.0


@pytest.fixture(autouse=True)
def _user_folder(tmp_path, monkeypatch):
    monkeypatch.setenv("RTVOICE_HOME", str(tmp_path / "home"))



def read(path: Path) -> tuple[int, np.ndarray]:
    rate, data = scipy.io.wavfile.read(path)
    assert data.dtype == np.float32 and data.ndim == 1
    return rate, data


def listing(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` (temporary ones included) with its bytes."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def plain_render(tmp_path: Path, name: str, sound: list[str], capsys) -> np.ndarray:
    out = tmp_path / "plain" / name
    out.parent.mkdir(exist_ok=True)
    code, _, err = run_cli(["render", *NOTE, "-o", str(out), *sound], capsys)
    assert code == 0, err
    return read(out)[1]


def assert_is_plain_render_then_silence(take: np.ndarray, plain: np.ndarray) -> None:
    assert np.array_equal(take[: plain.size], plain)  # bit-identical: float32 samples, no tolerance
    assert not np.any(take[plain.size :]), \
        "sound after the plain render's end: " + failing(take[plain.size :] == 0, take[plain.size :], what="samples")


def harmonic_levels_db(x: np.ndarray, fs: int, f0_hz: float, count: int) -> np.ndarray:
    """Level of harmonics 1..count re the strongest: the largest Hann-windowed FFT magnitude within
    f0/4 of k f0, over the held part of the note (common practice)."""
    held = x[int(0.02 * fs) : int(0.47 * fs)].astype(float)
    pad = 8
    spec = np.abs(np.fft.rfft(held * np.hanning(held.size), pad * held.size))
    freqs = np.fft.rfftfreq(pad * held.size, 1 / fs)
    levels = np.array([spec[np.abs(freqs - k * f0_hz) <= f0_hz / 4].max() for k in range(1, count + 1)])
    return db(levels / levels.max())


def peak_dbfs_printed(stdout: str, path: Path) -> float:
    line = next(ln for ln in stdout.splitlines() if ln.startswith(f"wrote {path}:"))
    return float(re.search(r"peak (-?[\d.]+) dBFS", line).group(1))


@pytest.mark.parametrize(
    ("sound_a", "sound_b"),
    [
        ([], ["--set-b", "string.release=1.5"]),  # B rings on far longer: A is padded
        (["--set", "string.release=1.5"], ["--set-b", "string.release=0.1"]),  # A rings on: B is padded
    ],
    ids=["b-longer", "a-longer"],
)
def test_two_set_groups_line_up_and_each_file_is_its_plain_render(tmp_path, capsys, sound_a, sound_b):
    code, out, err = run_cli(["render", *NOTE, "-o", str(tmp_path / "take.wav"), *sound_a, *sound_b], capsys)
    assert code == 0, err
    assert err == ""
    assert not (tmp_path / "take.wav").exists()
    rate_a, take_a = read(tmp_path / "take-A.wav")
    rate_b, take_b = read(tmp_path / "take-B.wav")
    assert rate_a == rate_b == 48000
    assert take_a.size == take_b.size

    plain_a = plain_render(tmp_path, "a.wav", sound_a, capsys)
    plain_b = plain_render(tmp_path, "b.wav", ["--set" if s == "--set-b" else s for s in sound_b], capsys)
    # A release T60 of 1.5 s against 0.1-0.15 s: the longer ring-out is a second or more longer.
    assert abs(plain_a.size - plain_b.size) > rate_a
    assert take_a.size == max(plain_a.size, plain_b.size)
    assert_is_plain_render_then_silence(take_a, plain_a)
    assert_is_plain_render_then_silence(take_b, plain_b)

    for path, samples, label in ((tmp_path / "take-A.wav", take_a, "A"), (tmp_path / "take-B.wav", take_b, "B")):
        assert f"{path}: {label} = the default sound" in out
        assert peak_dbfs_printed(out, path) == pytest.approx(db(np.max(np.abs(samples))), abs=0.051)
    assert "silence added" in out and "B differs from A in string.release" in out


def test_pickup_at_a_quarter_silences_every_fourth_harmonic_and_at_a_third_every_third(tmp_path, capsys):
    # A point pickup at x senses mode k as sin(k pi x), so it misses every n-th harmonic when x = 1/n
    # (Paiva, Pakarinen & Valimaki, "Acoustics and Modeling of Pickups", JAES 60(10), 2012; common practice).
    # No stiffness, so harmonic k sits at k f0; the pluck at 0.13 has no node among the first eight.
    # Open rule: a third of the string lies over a fretted neck, and string.inharmonicity is the note's B.
    common = ["instrument.assign=open", "string.inharmonicity=0", "pickup.0.width=0", "excitation.position=0.13"]
    sound_a = [*common, "pickup.0.position=0.25"]
    sound_b = [*common, "pickup.0.position=0.3333333333333333"]
    argv = ["render", *NOTE, "-o", str(tmp_path / "pos.wav")]
    argv += [a for s in sound_a for a in ("--set", s)] + [a for s in sound_b for a in ("--set-b", s)]
    code, out, err = run_cli(argv, capsys)
    assert code == 0, err
    fs, take_a = read(tmp_path / "pos-A.wav")
    _, take_b = read(tmp_path / "pos-B.wav")
    assert not np.array_equal(take_a, take_b)
    assert "B differs from A in pickup.0.position" in out

    harmonics = np.arange(1, 9)
    for samples, silent in ((take_a, {4, 8}), (take_b, {3, 6})):
        levels = harmonic_levels_db(samples, fs, E2_HZ, harmonics.size)
        measured_silent = {int(k) for k, level in zip(harmonics, levels, strict=True) if level < SILENT_BELOW_DB}
        assert measured_silent == silent, np.round(levels, 1)
        sounding = [k - 1 for k in harmonics if k not in silent]
        assert np.all(levels[sounding] > SOUNDING_ABOVE_DB), \
            f"want > {SOUNDING_ABOVE_DB} dB: " + failing(levels[sounding] > SOUNDING_ABOVE_DB, levels[sounding],
                                                         harmonics[sounding], "harmonics")
    # The harmonic one file lacks sounds in the other, at its place: 4 f0 in B, 3 f0 in A.
    held = slice(int(0.02 * fs), int(0.47 * fs))
    assert peak_frequency_hz(take_b[held].astype(float), fs, 4 * E2_HZ, 20) == pytest.approx(4 * E2_HZ, abs=0.5)
    assert peak_frequency_hz(take_a[held].astype(float), fs, 3 * E2_HZ, 20) == pytest.approx(3 * E2_HZ, abs=0.5)


def make_short_piece(path: Path) -> None:
    """Three notes and a two-note chord, our own: a type 1 file at 120 beats a minute."""
    mid = mido.MidiFile(type=1, ticks_per_beat=480)
    track = mido.MidiTrack()
    for i, note in enumerate([45, 52, 57]):
        track.append(mido.Message("note_on", note=note, velocity=90, time=0 if i == 0 else 200))
        track.append(mido.Message("note_off", note=note, time=200))
    track.append(mido.Message("note_on", note=40, velocity=110, time=0))
    track.append(mido.Message("note_on", note=47, velocity=100, time=0))
    track.append(mido.Message("note_off", note=40, time=480))
    track.append(mido.Message("note_off", note=47, time=0))
    mid.tracks.append(track)
    mid.save(path)


def test_two_presets_from_a_midi_file_as_a_separate_process(tmp_path):
    piece = tmp_path / "piece.mid"
    make_short_piece(piece)
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", RTVOICE_HOME=str(tmp_path / "home"))

    def rtvoice(*args: str) -> subprocess.CompletedProcess:
        return subprocess.run([sys.executable, "-m", "rtvoice.cli", *args], capture_output=True, text=True,
                              cwd=tmp_path, env=env, timeout=300)

    r = rtvoice("render", str(piece), "--preset", "glass-bridge", "--ab", "harbor-baritone",
                "-o", "bright.wav", "--output-b", "deep.wav")
    assert r.returncode == 0, r.stderr
    assert "bright.wav: A = preset glass-bridge" in r.stdout and "deep.wav: B = preset harbor-baritone" in r.stdout
    rate_a, take_a = read(tmp_path / "bright.wav")
    rate_b, take_b = read(tmp_path / "deep.wav")
    assert rate_a == rate_b and take_a.size == take_b.size
    assert not np.array_equal(take_a, take_b)
    for preset, take in (("glass-bridge", take_a), ("harbor-baritone", take_b)):
        plain = tmp_path / f"plain-{preset}.wav"
        assert rtvoice("render", str(piece), "--preset", preset, "-o", str(plain)).returncode == 0
        assert_is_plain_render_then_silence(take, read(plain)[1])
    assert max(np.max(np.abs(take_a)), np.max(np.abs(take_b))) <= 0.891251  # the -1 dBFS ceiling


@pytest.mark.parametrize(
    ("sound_b", "needle"),
    [
        (["--output-b", "{folder}/b.wav"], "A and B are the same sound"),
        (["--ab", "{preset_file}"], "A and B are the same sound"),  # the defaults, written out as a preset
        # mm labels only: open strings, whose places are fractions of each note's own length (on a fretted
        # neck the scale sets the strings' tension and stiffness, so the sound changes with it)
        (["--set", "instrument.assign=open", "--set-b", "instrument.assign=open", "--set-b",
          "string.scale_length_mm=700"], "differ only in string.scale_length_mm"),
    ],
)
def test_identical_sounds_warn_and_still_write_both(tmp_path, capsys, sound_b, needle):
    preset_file = tmp_path / "same.toml"
    preset_file.write_text('name = "same"\n')
    fill = {"folder": str(tmp_path), "preset_file": str(preset_file)}
    argv = ["render", *NOTE, "-o", str(tmp_path / "a.wav"), *[s.format(**fill) for s in sound_b]]
    code, _, err = run_cli(argv, capsys)
    assert code == 0
    assert len(err.strip().splitlines()) == 1 and "warning" in err and needle in err
    written = sorted(tmp_path.glob("*.wav"))
    assert len(written) == 2, written
    assert np.array_equal(read(written[0])[1], read(written[1])[1])


LONG_NAME = "b" * 250 + ".wav"  # a legal name, but too long once the temporary file's prefix and suffix are on


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--ab", "no-such-preset"], "no preset named"),
        (["--ab", "{folder}/missing.toml"], "no such preset file"),
        (["--set-b", "string.colour=3"], "--set-b: string.colour"),
        (["--set-b", "pickup.0.position=1.5"], "out of range"),
        (["--set-b", "noequals"], "KEY=VALUE"),
        (["--output-b", "{out}"], "same file"),
        (["--output-b", "{folder}/./take.wav"], "same file"),
        (["--output-b", "{folder}/no/such/b.wav"], "no such folder"),
        (["--set-b", "voices=3", "-o", "{folder}/taken.wav"], "taken-B.wav is a folder"),
        (["--set-b", "voices=3", "-o", "{folder}/" + "c" * 250 + ".wav"], "File name too long"),  # with -A, -B
        # B's temporary file cannot be made, found only once A has been rendered to its own: that must go too.
        (["--output-b", "{folder}/" + LONG_NAME], "File name too long"),
    ],
)
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, capsys, args, needle):
    (tmp_path / "taken-B.wav").mkdir()
    (tmp_path / "taken-B.wav" / "inside").write_bytes(b"kept")
    fill = {"folder": str(tmp_path), "out": str(tmp_path / "take.wav")}
    before = listing(tmp_path)
    argv = ["render", *NOTE, "-o", fill["out"], *[a.format(**fill) for a in args]]
    code, out, err = run_cli(argv, capsys)
    assert code == 2, (out, err)
    assert len(err.strip().splitlines()) == 1 and "error" in err and needle in err, err
    assert "Traceback" not in err and out == ""
    assert listing(tmp_path) == before


# -- a real full disk and a real read-only folder (tmpfs mounts; root only) ----------------------------------



@pytest.mark.parametrize(("size", "read_only", "needle"), [
    ("64k", False, "No space left on device"),  # B's file outgrows the disk after A was rendered
    ("1m", True, "not writable"),  # refused before anything is rendered
])
def test_b_on_a_full_or_read_only_disk_leaves_neither_file(tmp_path, capsys, size, read_only, needle):
    disk = tmp_path / "disk"
    mount_tmpfs(disk, size, read_only)
    try:
        argv = ["render", *NOTE, "-o", str(tmp_path / "a.wav"), "--output-b", str(disk / "b.wav")]
        code, _, err = run_cli(argv, capsys)
        assert code == 2 and len(err.strip().splitlines()) == 1 and needle in err, err
        assert listing(disk) == {}
    finally:
        unmount(disk)
    assert listing(tmp_path) == {}
