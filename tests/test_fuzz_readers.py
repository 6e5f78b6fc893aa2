"""Fuzzing the MIDI file reader and the preset reader, bounded in time.

Hypothesis feeds raw bytes, mutations of valid files (the demo song, hand-built
SMF 1.0 files, the factory presets) and files generated from their structure;
the checks in tests/fuzz_targets.py allow only the documented errors and
well-formed results. The coverage-guided variant (atheris) runs from
``scripts/fuzz``; ``test_atheris_briefly`` runs it for a few seconds when atheris
is installed.
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
from pathlib import Path

import pytest
import tomli_w
from fuzz_targets import ROOT, check_midi, check_preset, seed_files
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_reliability_files import CASES, TWO_TRACKS, chunk, header, vlq

from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS

# Bounded: every test here takes a few seconds at most, the file well under 20 s.
FAST = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
EXAMPLES = {"midi": 0, "preset": 0}  # counted for the report


def counted(kind, check):
    def run(data: bytes) -> None:
        EXAMPLES[kind] += 1
        check(data)

    return run


midi = counted("midi", check_midi)
preset = counted("preset", check_preset)

MIDI_SEEDS = [p.read_bytes() for p in seed_files("midi")] + [TWO_TRACKS] + [
    c[1] for c in CASES if not isinstance(c[2], tuple)]
PRESET_SEEDS = [p.read_bytes() for p in seed_files("preset")]


@st.composite
def mutated(draw, seeds: list[bytes]) -> bytes:
    """A seed with a few byte-level edits: flip, set, insert, delete, truncate, duplicate a stretch."""
    data = bytearray(draw(st.sampled_from(seeds)))
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["flip", "set", "insert", "delete", "truncate", "repeat"]))
        i = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "flip" and data:
            data[i] ^= 1 << draw(st.integers(0, 7))
        elif op == "set" and data:
            data[i] = draw(st.sampled_from([0x00, 0x7F, 0x80, 0xF0, 0xF7, 0xFF, draw(st.integers(0, 255))]))
        elif op == "insert":
            data[i:i] = draw(st.binary(min_size=1, max_size=8))
        elif op == "delete":
            del data[i:i + draw(st.integers(1, 8))]
        elif op == "truncate":
            del data[i:]
        elif op == "repeat":
            data[i:i] = data[i:i + draw(st.integers(1, 32))]
    return bytes(data)


@st.composite
def generated_smf(draw) -> bytes:
    """Correctly framed chunks around random events: any status, data, delta (up to 0x0FFFFFFF) and lengths."""
    tracks = []
    for _ in range(draw(st.integers(1, 3))):
        body = bytearray()
        for _ in range(draw(st.integers(0, 12))):
            body += vlq(draw(st.one_of(st.integers(0, 200), st.just(0x0FFFFFFF))))
            kind = draw(st.sampled_from(["channel", "running", "meta", "tempo", "sysex", "junk"]))
            if kind == "channel":
                body += bytes([draw(st.integers(0x80, 0xEF)), draw(st.integers(0, 127)), draw(st.integers(0, 127))])
            elif kind == "running":
                body += bytes([draw(st.integers(0, 127)), draw(st.integers(0, 255))])
            elif kind == "meta":
                payload = draw(st.binary(max_size=6))
                body += bytes([0xFF, draw(st.integers(0, 0x7F))]) + vlq(max(0, len(payload) + draw(st.integers(-1, 1))))
                body += payload
            elif kind == "tempo":
                body += b"\xff\x51\x03" + draw(st.integers(0, 0xFFFFFF)).to_bytes(3, "big")
            elif kind == "sysex":
                payload = draw(st.binary(max_size=6))
                body += bytes([draw(st.sampled_from([0xF0, 0xF7]))]) + vlq(len(payload)) + payload
            else:
                body += draw(st.binary(min_size=1, max_size=3))
        if draw(st.booleans()):
            body += b"\x00\xff\x2f\x00"
        tracks.append(chunk(b"MTrk", bytes(body)))
    division = draw(st.one_of(st.integers(0, 0x7FFF), st.sampled_from([0xE728, 0xE250, 0xE30A, 0xE801, 0x8000])))
    fmt = draw(st.sampled_from([0, 1, 1, 2, 3]))
    return header(fmt, len(tracks), division) + b"".join(tracks)


@FAST
@given(st.binary(max_size=600))
def test_midi_reader_on_raw_bytes(data):
    midi(data)


@FAST
@given(st.binary(max_size=300).map(lambda tail: b"MThd\x00\x00\x00\x06\x00\x01\x00\x02\x01\xe0MTrk" + tail))
def test_midi_reader_on_bytes_after_a_valid_header(data):
    midi(data)


@settings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated(MIDI_SEEDS))
def test_midi_reader_on_mutated_valid_files(data):
    midi(data)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(generated_smf())
def test_midi_reader_on_generated_files(data):
    midi(data)


@FAST
@given(st.binary(max_size=400))
def test_preset_reader_on_raw_bytes(data):
    preset(data)


TOML_VALUES = ["nan", "inf", "-inf", "1e308", "-1e308", "0", "-1", "1" + "0" * 25, "true", '"x"', "''", "[]",
               "[[0.5, 1.0]]", "[1, 2]", "{a = 1}", "1979-05-27", "07:32:00", "0.5", "3", '"velocity"', '"pluck"',
               "[" * 40 + "]" * 40, '"""multi\nline"""', "0x10", "1_000"]


@st.composite
def edited_preset_text(draw) -> bytes:
    """A factory preset with its lines edited: values swapped for odd TOML, lines dropped, doubled or added."""
    lines = draw(st.sampled_from(PRESET_SEEDS)).decode("utf-8").splitlines()
    for _ in range(draw(st.integers(1, 5))):
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        op = draw(st.sampled_from(["value", "value", "drop", "double", "add", "format"]))
        if op == "value" and lines and "=" in lines[i]:
            lines[i] = lines[i].split("=", 1)[0] + "= " + draw(st.sampled_from(TOML_VALUES))
        elif op == "drop" and lines:
            del lines[i]
        elif op == "double" and lines:
            lines.insert(i, lines[i])
        elif op == "add":
            key = draw(st.sampled_from([*(n.split(".")[-1] for n in PARAMS), *PICKUP_FIELDS, "mystery", "format"]))
            lines.insert(i, f"{key} = {draw(st.sampled_from(TOML_VALUES))}")
        elif op == "format":
            lines.insert(0, f"format = {draw(st.sampled_from(['1', '2', '0', 'nan', '99']))}")
    return "\n".join(lines).encode("utf-8")


@settings(max_examples=500, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(edited_preset_text())
def test_preset_reader_on_edited_factory_presets(data):
    preset(data)


SCALARS = st.one_of(st.integers(-(2**70), 2**70), st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
                    st.text(max_size=8), st.sampled_from(["pluck", "strike", "velocity", "displacement"]))
KEYS = st.one_of(st.sampled_from(sorted({n.split(".")[0] for n in PARAMS} | {"name", "description", "pickup",
                                                                         "control", "voices", "format"})),
                 st.sampled_from(sorted({n.split(".")[-1] for n in PARAMS} | set(PICKUP_FIELDS))),
                 st.text(min_size=1, max_size=6))
TREES = st.recursive(SCALARS, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                      st.dictionaries(KEYS, inner, max_size=5)), max_leaves=12)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(KEYS, TREES, max_size=6))
def test_preset_reader_on_generated_tables(tree):
    try:
        text = tomli_w.dumps(tree)
    except (TypeError, ValueError):
        return  # not expressible as TOML (e.g. mixed nesting tomli_w refuses): nothing to read
    preset(text.encode("utf-8"))


def test_examples_ran():
    # Counted over the tests above (pytest runs this module in file order).
    if EXAMPLES["midi"] == 0 or EXAMPLES["preset"] == 0:
        pytest.skip("run with the tests above it")
    print(f"fuzz examples: {EXAMPLES}")
    assert EXAMPLES["midi"] >= 1000 and EXAMPLES["preset"] >= 500


def atheris_python() -> str | None:
    """A Python with atheris: this one, or the repo's .venv that scripts/fuzz sets up."""
    if importlib.util.find_spec("atheris") is not None:
        return sys.executable
    venv = ROOT / ".venv" / "bin" / "python"
    if venv.exists():
        probe = subprocess.run([str(venv), "-c", "import atheris, rtvoice"], capture_output=True)
        if probe.returncode == 0:
            return str(venv)
    return None


@pytest.mark.parametrize("target", ["midi", "preset"])
def test_atheris_briefly(tmp_path, target):
    python = atheris_python()
    if python is None:
        pytest.skip("atheris is not installed here; scripts/fuzz installs it into .venv and runs it")
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    r = subprocess.run([python, str(Path(__file__).with_name("fuzz_targets.py")), target, str(tmp_path / "corpus"),
                        "-max_total_time=3",
                        f"-artifact_prefix={tmp_path}/", "-print_final_stats=1"],
                       capture_output=True, text=True, env=env, timeout=120, cwd=tmp_path)
    assert r.returncode == 0, r.stderr[-3000:]
    assert "stat::number_of_executed_units" in r.stderr
    assert not list(tmp_path.glob("crash-*"))
