"""The host's pieces on their own: sample ring, shared board, device choice, options, PortAudio."""

from __future__ import annotations

import builtins
import threading
import time

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from rtvoice.host.audio import find_device, load_sounddevice
from rtvoice.host.board import FIELDS, MAX_MODES, Board
from rtvoice.host.errors import HostError
from rtvoice.host.options import parse_mpe
from rtvoice.host.ring import SampleRing


@given(st.lists(st.integers(1, 700), min_size=1, max_size=60), st.integers(16, 1000))
def test_ring_keeps_the_newest_samples_in_order_across_wrap_around(sizes, size):
    ring = SampleRing(size)
    written = []
    counter = 0
    for n in sizes:
        block = np.arange(counter, counter + n, dtype=np.float32)
        counter += n
        ring.push(block)
        written.append(block)
    everything = np.concatenate(written)
    k = min(size, everything.size)
    out = np.empty(k, np.float32)
    ring.latest(out)
    np.testing.assert_array_equal(out, everything[-k:])


def test_ring_reader_gets_every_sample_once_and_counts_overruns():
    ring = SampleRing(1000)
    pos = 0
    got = []
    for i in range(10):
        ring.push(np.full(300, i, np.float32))
        data, pos, lost = ring.read_since(pos)
        assert lost == 0
        got.append(data)
    np.testing.assert_array_equal(np.concatenate(got), np.repeat(np.arange(10, dtype=np.float32), 300))
    for _ in range(5):  # the reader falls behind by more than the ring holds
        ring.push(np.full(300, 99, np.float32))
    data, pos, lost = ring.read_since(pos)
    assert lost == 500 and data.size == 1000 and pos == ring.written


def test_board_reader_never_sees_a_half_written_update():
    """The writer makes every field and array hold the same count; a torn copy would mix two."""
    writer_board = Board.create()
    reader_board = Board.attach(writer_board.name)
    stop = threading.Event()

    def write():
        i = 0
        while not stop.is_set():
            i += 1
            writer_board.begin()
            for name in FIELDS:
                writer_board.put(name, i)
            writer_board.mode_levels_db[:] = i
            writer_board.mode_freqs_hz[:] = i
            writer_board.spectrum_db[:] = i
            writer_board.end()
            time.sleep(0.0002)  # the engine updates 30 times a second; here thousands of times

    t = threading.Thread(target=write)
    t.start()
    try:
        seen: set = set()
        deadline = time.monotonic() + 5.0
        reads = 0
        # Read until the writer has moved on a few times (the GIL may keep it waiting at first).
        while reads < 3000 or (len(seen) < 5 and time.monotonic() < deadline):
            reads += 1
            fields, levels, freqs, spec = reader_board.read()
            if fields["blocks"] == 0:
                continue  # the state before the first update: consistent, but not all one value
            values = {fields[n] for n in FIELDS} | set(levels.tolist()) | set(freqs.tolist()) | set(spec.tolist())
            assert len(values) == 1
            seen |= values
        assert len(seen) > 1  # the writer did move on while we read
    finally:
        stop.set()
        t.join()
        reader_board.close()
        writer_board.close()
    assert levels.shape == (MAX_MODES,)


def test_missing_portaudio_says_how_to_install_it(monkeypatch):
    """PortAudio is installed here, so its absence is faked: importing sounddevice raises
    OSError exactly as it does without libportaudio2."""
    real_import = builtins.__import__

    def fake_import(name, *args, **kwargs):
        if name == "sounddevice":
            raise OSError("PortAudio library not found")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", fake_import)
    sd, reason = load_sounddevice()
    assert sd is None
    assert "PortAudio" in reason and "install" in reason
    assert "\n" not in reason  # one line


class _FakePortAudio:
    """A PortAudio with several outputs (this machine has one; names and ambiguity need more)."""

    class default:  # noqa: N801 - mirrors sounddevice.default
        device = (-1, 2)

    _apis = [{"name": "ALSA"}, {"name": "JACK Audio Connection Kit"}]
    _devices = [
        {"index": 0, "name": "USB Audio Interface", "hostapi": 0, "max_output_channels": 2},
        {"index": 1, "name": "Microphone", "hostapi": 0, "max_output_channels": 0},
        {"index": 2, "name": "system", "hostapi": 1, "max_output_channels": 2},
        {"index": 3, "name": "USB Audio Interface 2", "hostapi": 0, "max_output_channels": 2},
    ]

    def query_hostapis(self):
        return self._apis

    def query_devices(self, kind=None):
        return self._devices


def test_device_choice_by_default_by_name_and_by_number():
    sd = _FakePortAudio()
    assert find_device(sd, None)["name"] == "system"  # PortAudio's default output
    assert find_device(sd, "system")["index"] == 2
    assert find_device(sd, "usb audio interface")["index"] == 0  # an exact name beats a part of one
    assert find_device(sd, "3")["index"] == 3
    assert find_device(sd, "jack")["index"] == 2  # the host API's name counts too
    with pytest.raises(HostError, match="several"):
        find_device(sd, "usb")
    with pytest.raises(HostError, match="no audio output device matches 'Microphone'"):
        find_device(sd, "Microphone")  # an input only


def test_mpe_zone_option():
    assert parse_mpe(None) == [] and parse_mpe("off") == []
    assert parse_mpe("lower") == [("lower", 15)]
    assert parse_mpe("lower=7,upper=7") == [("lower", 7), ("upper", 7)]
    for bad in ("middle", "lower=x", "upper=16"):
        with pytest.raises(HostError, match="--mpe"):
            parse_mpe(bad)
