"""The CPU wake-up request (rtvoice.host.cpu_wakeup) against the kernel's own interface.

Linux PM QoS (Documentation/power/pm_qos_interface.rst): a 32-bit value written to
/dev/cpu_dma_latency stands while the file is open, and reading the file gives the least
value of all requests standing (2,000,000,000 us when none: PM_QOS_CPU_LATENCY_DEFAULT_VALUE,
cited from memory). The real device is used where this process may write it (root here).
"""

from __future__ import annotations

import os

import pytest

from rtvoice.engine.settings import Settings
from rtvoice.host import cpu_wakeup
from rtvoice.host.link import EngineLink

CAN_WRITE = os.path.exists(cpu_wakeup.DEVICE) and os.access(cpu_wakeup.DEVICE, os.W_OK)


def test_the_setting_reads_off_or_whole_microseconds():
    assert cpu_wakeup.wanted_us(None) == cpu_wakeup.DEFAULT_US == 0
    assert cpu_wakeup.wanted_us("") == 0
    assert cpu_wakeup.wanted_us(" 20 ") == 20
    assert cpu_wakeup.wanted_us("off") is None and cpu_wakeup.wanted_us("OFF") is None
    for bad in ("-1", "fast", "1.5"):
        with pytest.raises(ValueError):
            cpu_wakeup.wanted_us(bad)


def test_no_device_is_reported_not_raised(tmp_path):
    fd, text = cpu_wakeup.request(0, str(tmp_path / "missing"))
    assert fd is None and text.startswith("not available")
    assert cpu_wakeup.request(None) == (None, "not asked (off)")


@pytest.mark.skipif(not CAN_WRITE, reason="needs write access to /dev/cpu_dma_latency (root, or a group given it)")
def test_the_request_stands_while_open_and_goes_with_the_file():
    before = cpu_wakeup.current_us()
    fd, text = cpu_wakeup.request(7)
    try:
        assert fd is not None and "7 us" in text
        assert cpu_wakeup.current_us() == min(before, 7)
    finally:
        cpu_wakeup.release(fd)
    assert cpu_wakeup.current_us() == before


@pytest.mark.skipif(not CAN_WRITE, reason="needs write access to /dev/cpu_dma_latency (root, or a group given it)")
def test_the_engine_process_holds_the_request_while_it_plays_and_says_so(monkeypatch):
    before = cpu_wakeup.current_us()
    monkeypatch.setenv(cpu_wakeup.ENV, "3")
    link = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    try:
        assert link.ready_info.cpu_wakeup == "CPU wake-up held within 3 us while playing"
        assert cpu_wakeup.current_us() == min(before, 3)
    finally:
        link.close()
    assert cpu_wakeup.current_us() == before
    assert link.summary["cpu_wakeup"].startswith("CPU wake-up held")


def test_a_value_it_cannot_read_is_said_and_the_default_asked(monkeypatch):
    monkeypatch.setenv(cpu_wakeup.ENV, "fast")
    fd, text = cpu_wakeup.request_from_environment()
    try:
        assert "'fast'" in text and "asked for the default" in text
        if CAN_WRITE:
            assert fd is not None and cpu_wakeup.current_us() == cpu_wakeup.DEFAULT_US
    finally:
        cpu_wakeup.release(fd)
