"""Live MIDI abuse of ``rtvoice play --headless --record`` on a real JACK server (dummy backend).

One host process serves the module; MIDI goes into its virtual JACK MIDI port from two
senders of this test: python-rtmidi's JACK output (its own C++ thread sends, fast enough for
a flood) and :class:`support.midi_senders.RawMidiSender`, a libjack client that writes any bytes as one
event (python-rtmidi refuses events over three bytes that do not start with F0). What the
host played is read back from its ``--record`` file, which holds exactly what went out.

Sources: MIDI 1.0 Detailed Specification (status and data bytes, running status, system
exclusive F0 .. F7 ended by EOX or any status byte, real-time bytes F8-FF allowed anywhere,
CC64 sustain, CC120 all sound off, CC121 reset all controllers, CC123 all notes off, 14-bit
pitch bend centred at 8192); JACK MIDI (jack/midiport.h): one event holds whole messages.
12-TET f = 440 * 2^((n - 69) / 12), A4 = 440 Hz (ISO 16:1975). Ceiling: -1 dBFS
(rtvoice.engine.output.CEILING), the project's listening-safety rule.

rtmidi's JACK input (5.0) would take every event after a sysex that starts but never ends
(F0 .. with no F7) as more of that sysex until some event ends with F7; the host ends such a
sysex itself with a lone EOX sent to its own inputs (rtvoice.host.midi_ports), and the random
stream ends inside an unterminated sysex to check it.

Flood figures: 10,000 note-ons per second is about ten times what a MIDI 1.0 cable can carry
(31,250 baud, 30 bits a note-on: 1,041 per second). The CI flood lasts FLOOD_S = 6 s (the
issue asks for 10 s: set RTVOICE_FLOOD_S=10 for the full run).
"""

from __future__ import annotations

import os
import time
import warnings

import numpy as np
import pytest
from analysis import peak_frequency_hz
from support.describe import finite_peak, nonfinite
from support.headless_host import HeadlessHost
from support.jack_server import connect
from support.midi_senders import RawMidiSender, RtmidiSender

from rtvoice.engine.output import CEILING

pytestmark = pytest.mark.jack

FLOOD_S = float(os.environ.get("RTVOICE_FLOOD_S", "6"))
FLOOD_PER_S = 10_000


def xrun_allowance(idle_xruns: int) -> int:
    """xruns (or late callbacks) a busy window may have beyond a control window of the same
    length and traffic, by chance alone.

    On a shared 2-core machine other processes cause xruns at random; taken as Poisson counts
    with the control's rate, the difference of two windows has a standard deviation of about
    sqrt(2 * control); two of those plus two (for a count of zero) is the allowance.
    """
    return int(2 + 2 * np.sqrt(2 * idle_xruns))

NOISY_XRUNS_PER_S = 1.0  # a control window with more xruns than this says the machine is too busy to compare
JUDGE_TIMING = os.environ.get("RTVOICE_JUDGE_TIMING") == "1"  # see _check_budget
P99_LIMIT = 0.9  # callback p99 as a share of the block period: inside its budget, with room
SILENT = 1e-4  # -80 dBFS
T60_S = 8.0
SOUND = ["--set", "string.inharmonicity=0", "--set", f"string.t60_low={T60_S}", "--set", f"string.t60_high={T60_S}"]
# CC7 is mapped to output.gain_db over -60..0 dB (14-bit, rtvoice.engine.controls defaults):
# 14745 of 16383 is -6 dB, the default gain, restored before each check note.
GAIN_MSB, GAIN_LSB = 14745 >> 7, 14745 & 127
# CC72 is mapped to string.release over 0.02..4 s, log: 48 of 127 is 0.146 s, near the default 0.15 s.
RELEASE_CC_VALUE = 48


def equal_tempered_hz(note: int) -> float:
    return 440.0 * 2.0 ** ((note - 69) / 12)


class Live:
    """The module's host and its two MIDI senders."""

    def __init__(self, host: HeadlessHost, fast: RtmidiSender, raw: RawMidiSender):
        self.host, self.fast, self.raw = host, fast, raw

    def panic(self) -> None:
        """Pedal up, all notes off and all sound off, controllers reset and gain back, on all 16 channels."""
        for ch in range(16):
            for cc, value in ((64, 0), (123, 0), (120, 0), (121, 0), (7, GAIN_MSB), (39, GAIN_LSB),
                              (72, RELEASE_CC_VALUE)):
                self.fast.send([0xB0 | ch, cc, value])
            self.fast.send([0xE0 | ch, 0, 64])

    def frames(self) -> int:
        return self.host.recorded().size

    def check_note(self, note: int = 57, *, send=None) -> float:
        """Silence everything, play ``note`` (via ``send`` or rtmidi) and return its pitch error in cents."""
        self.panic()
        time.sleep(0.6)
        start = self.frames()
        (send or self.fast.send)([0x90, note, 100])
        time.sleep(1.0)
        self.fast.send([0x80, note, 0])
        time.sleep(0.3)  # the writer thread appends every 50 ms
        x = self.host.recorded()[start:]
        loud = np.flatnonzero(np.abs(x) > 1e-3)
        assert loud.size, "the note after the abuse did not sound"
        rate = self.host.rate
        i = int(loud[0])
        assert i > 0 and np.max(np.abs(x[:i])) < 1e-3, "not silent before the note: the panic did not arrive"
        seg = x[i + rate // 10: i + int(0.9 * rate)]
        assert seg.size > rate // 2
        want = equal_tempered_hz(note)
        f = peak_frequency_hz(seg, rate, want, 20.0)
        return 1200 * np.log2(f / want)


@pytest.fixture(scope="module")
def live(jack_server, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("live")
    name = f"rtvlive{os.getpid()}"
    host = HeadlessHost(name, tmp / "host.log", rate=jack_server.sample_rate_hz,
                                 block=jack_server.buffer_frames, extra=SOUND, record=tmp / "take.wav")
    fast = raw = None
    try:
        host.wait_ready()
        fast = RtmidiSender(f"{name}-fast")
        raw = RawMidiSender(f"{name}-raw")
        connect(fast.port, host.midi_port)
        connect(raw.port, host.midi_port)
        time.sleep(0.6)  # the output ramps in from silence over 0.5 s
        yield Live(host, fast, raw)
    finally:
        for sender in (fast, raw):
            if sender is not None:
                sender.close()
        code = host.stop()
    assert code == 0, host.log()[-2000:]
    x = host.recorded()
    assert x.size > 0, "nothing was recorded"
    assert np.all(np.isfinite(x)) and np.max(np.abs(x)) <= CEILING, finite_peak(x, CEILING)  # the whole take


def _random_events(rng: np.random.Generator) -> list[bytes]:
    """Garbage of every kind the MIDI 1.0 byte grammar allows and some it does not."""
    events: list[bytes] = []
    for _ in range(400):  # random bytes, one to twelve per event
        events.append(rng.integers(0, 256, rng.integers(1, 13), dtype=np.uint8).tobytes())
    for n in (0, 1, 2, 3, 127, 128, 255, 256, 1000, 4095, 4096, 10_000, 20_000, 32_000):
        payload = rng.integers(0, 128, n, dtype=np.uint8)  # sysex data bytes have bit 7 clear
        events.append(bytes([0xF0, *payload.tolist(), 0xF7]))
    for _ in range(50):  # sysex with real-time bytes inside: allowed anywhere
        payload = rng.integers(0, 128, 40, dtype=np.uint8).tolist()
        for k in rng.integers(0, 40, 4):
            payload.insert(int(k), int(rng.choice([0xF8, 0xFA, 0xFB, 0xFC, 0xFE, 0xFF])))
        events.append(bytes([0xF0, *payload, 0xF7]))
    for _ in range(100):  # stray data bytes, undefined and system common status bytes
        events.append(bytes([int(rng.integers(0, 128))]))
        events.append(bytes([int(rng.choice([0xF1, 0xF2, 0xF3, 0xF4, 0xF5, 0xF6, 0xF7, 0xF9, 0xFD]))]))
        events.append(bytes([int(rng.integers(0x80, 0xF0))]))  # a status byte with its data cut off
    rng.shuffle(events)
    # End inside a sysex that never ends: rtmidi's JACK input would hold every later event as
    # part of it until some event ends with F7; the host ends it itself (rtvoice.host.midi_ports).
    events.append(bytes([0xF0, 0x7D, 1, 2, 3]))
    return events


def test_random_bytes_sysex_and_stray_data_leave_the_host_playing(live):
    rng = np.random.default_rng(20261201)
    start = live.frames()
    before = live.host.next_status()
    events = _random_events(rng)
    for event in events:
        live.raw.send(event)
    live.raw.flush()
    assert live.raw.too_big == 0  # every event fitted JACK's MIDI buffer (max_event_bytes)
    time.sleep(0.3)
    assert live.host.running()
    cents = live.check_note(57)
    assert abs(cents) < 0.2, f"{cents:+.3f} cents off 12-TET"
    # A note-on with real-time bytes inside (MIDI 1.0: they may appear between any two bytes)
    # plays as the plain note-on; the raw sender writes it as one JACK event.
    def interleaved(msg: list[int]) -> None:
        live.raw.send([msg[0], 0xF8, msg[1], 0xFE, msg[2]])
        live.raw.flush()

    cents = live.check_note(64, send=interleaved)
    assert abs(cents) < 0.2, f"interleaved real-time: {cents:+.3f} cents off 12-TET"
    x = live.host.recorded()[start:]
    assert np.all(np.isfinite(x)) and np.max(np.abs(x)) <= CEILING, finite_peak(x, CEILING)
    after = live.host.next_status()
    print(f"random bytes: {len(events)} events, {after.midi - before.midi} channel messages reached the engine, "
          f"{after.xruns - before.xruns} xruns (a burst, not a budget test)")
    assert "audio callback" not in live.host.log()  # no error inside the callback


def _flood(live: Live, messages: list[list[int]], per_s: float) -> float:
    """Send ``messages`` at ``per_s`` a second (paced every 2 ms); returns seconds taken."""
    send = live.fast.send
    n, i = len(messages), 0
    t0 = time.monotonic()
    while i < n:
        due = min(n, int((time.monotonic() - t0) * per_s) + 1)
        while i < due:
            send(messages[i])
            i += 1
        time.sleep(0.002)
    return time.monotonic() - t0


class Window:
    """What the host's status lines and take show for one stretch of MIDI traffic."""

    def __init__(self, live: Live, messages: list[list[int]] | None, seconds: float):
        self.start = live.frames()
        first = live.host.next_status()
        count = len(live.host.statuses()) - 1
        if messages is None:
            time.sleep(seconds)
            self.took = seconds
        else:
            self.took = _flood(live, messages, FLOOD_PER_S)
        time.sleep(0.3)  # the last messages reach the engine, the meters publish them
        last = live.host.next_status()
        self.statuses = live.host.statuses()[count:]
        self.sent_per_s = 0.0 if messages is None else len(messages) / self.took
        self.xruns, self.late = last.xruns - first.xruns, last.late - first.late
        self.midi, self.dropped = last.midi - first.midi, last.dropped - first.dropped
        self.p99 = max(st.load_p99 for st in self.statuses)
        self.median = max(st.load_median for st in self.statuses)
        self.peak = float(np.max(np.abs(live.host.recorded()[self.start:])))


def _control(rng: np.random.Generator, n: int) -> list[list[int]]:
    """The same traffic the engine has nothing to do with: polyphonic key pressure (the
    engine leaves it alone), three bytes a message, on every channel."""
    return [[0xA0 | int(c), int(k), int(v)] for c, k, v in
            zip(rng.integers(0, 16, n), rng.integers(0, 128, n), rng.integers(0, 128, n), strict=True)]


def _check_budget(label: str, idle: Window, control: Window, busy: Window, live: Live) -> None:
    """Under ``busy`` the take stays finite and under the ceiling (always asserted). Whether the
    callback also stayed inside its budget (p99 below P99_LIMIT of the period, no more late
    callbacks and server xruns than the same MIDI traffic causes when the engine has no work,
    ``control``, within chance) is a timing figure: reported here, and judged only where the
    machine is ours alone, with RTVOICE_JUDGE_TIMING=1 (``scripts/soak`` sets it), because speed
    is checked by benchmarks and soaks, never by tests that flake on a shared machine."""
    x = live.host.recorded()[busy.start:]
    figures = (f"{label}: sent {busy.sent_per_s:.0f}/s, engine took {busy.midi / busy.took:.0f}/s, dropped "
               f"{busy.dropped}; load median {busy.median:.0%} p99 {busy.p99:.0%} (control {control.p99:.0%}); "
               f"xruns {busy.xruns} (control {control.xruns}, idle {idle.xruns} over {idle.took:.0f} s); "
               f"late callbacks {busy.late} (control {control.late}); peak {busy.peak:.4f}; "
               f"load average {os.getloadavg()[0]:.1f}")
    print(figures)
    assert np.all(np.isfinite(x)), f"{label}: {nonfinite(x)}"
    assert busy.peak <= CEILING, f"{label}: peak {busy.peak} over the ceiling {CEILING}"
    if not JUDGE_TIMING:
        return
    assert busy.sent_per_s > 0.95 * FLOOD_PER_S and control.sent_per_s > 0.95 * FLOOD_PER_S
    assert busy.p99 < P99_LIMIT, f"{label}: callback p99 {busy.p99:.0%} of the block period"
    assert busy.late <= control.late + xrun_allowance(control.late), f"{label}: {busy.late} late callbacks"
    idle_rate = idle.xruns / idle.took
    if max(idle_rate, control.xruns / control.took) > NOISY_XRUNS_PER_S:
        warnings.warn(f"{label}: the server had {idle.xruns} xruns in {idle.took:.0f} s idle and {control.xruns} "
                      f"in {control.took:.0f} s of traffic with no work for the engine: too busy a machine to "
                      f"compare xruns", stacklevel=2)
        return
    base = max(control.xruns, round(idle_rate * control.took))
    assert busy.xruns <= base + xrun_allowance(base), \
        f"{label}: {busy.xruns} xruns, {control.xruns} with the same traffic and nothing to play"

def transport_losses(window: Window, live: Live) -> int:
    """Messages that may be lost on the way: on an xrun JACK drops the MIDI of the cycle it
    missed (one period of the flood), and 1 % for the last messages still in flight."""
    period_s = live.host.block / live.host.rate
    return int(0.01 * window.sent_per_s * window.took + window.xruns * np.ceil(FLOOD_PER_S * period_s))


def _all_notes_off(live: Live) -> None:
    for ch in range(16):  # pedal up first: all notes off leaves held notes sounding
        for cc, value in ((72, RELEASE_CC_VALUE), (64, 0), (123, 0)):
            live.fast.send([0xB0 | ch, cc, value])


def test_ten_thousand_note_ons_a_second_keep_the_callback_in_budget(live):
    live.panic()
    time.sleep(0.5)
    rng = np.random.default_rng(7)
    n = int(FLOOD_PER_S * FLOOD_S)
    idle = Window(live, None, 2.0)
    control = Window(live, _control(rng, n), FLOOD_S)
    msgs = [[0x90 | int(c), int(k), int(v)] for c, k, v in
            zip(rng.integers(0, 16, n), rng.integers(21, 109, n), rng.integers(1, 128, n), strict=True)]
    busy = Window(live, msgs, FLOOD_S)
    _all_notes_off(live)
    _check_budget("note-on flood", idle, control, busy, live)
    assert busy.statuses[0].voices == 0 and max(st.voices for st in busy.statuses) > 0  # it played
    assert busy.peak > 0.05  # loud enough for the limiter to matter
    assert busy.dropped > 0
    assert n - busy.dropped - busy.midi <= transport_losses(busy, live), "note-ons vanished unaccounted"
    # Responsive afterwards: the all notes off silences it within the release.
    time.sleep(1.0)
    x = live.host.recorded()
    assert np.max(np.abs(x[-live.host.rate // 2:])) < SILENT, "still sounding 1 s after all notes off"
    assert abs(live.check_note(60)) < 0.2


def test_controllers_at_full_rate_on_every_channel_while_notes_ring(live):
    live.panic()
    time.sleep(0.5)
    seconds = 3.0
    rng = np.random.default_rng(11)
    n = int(FLOOD_PER_S * seconds)
    kinds = rng.integers(0, 4, n)
    ch = rng.integers(0, 16, n)
    a, b = rng.integers(0, 128, n), rng.integers(0, 128, n)
    ccs = rng.integers(0, 120, n)  # control change numbers; 120-127 are channel mode messages
    msgs = []
    for k, c, cc, d1, d2 in zip(kinds, ch, ccs, a, b, strict=True):
        c = int(c)
        if k == 0 or k == 1:
            msgs.append([0xB0 | c, int(cc), int(d2)])
        elif k == 2:
            msgs.append([0xE0 | c, int(d1), int(d2)])  # pitch bend
        else:
            msgs.append([0xD0 | c, int(d1)] if d2 & 1 else [0xA0 | c, int(d1), int(d2)])  # channel / poly pressure
    idle = Window(live, None, seconds / 2)
    control = Window(live, _control(rng, n), seconds)
    for c, note in ((0, 45), (3, 52), (9, 57), (15, 64)):  # notes ringing on four channels
        live.fast.send([0x90 | c, note, 100])
    time.sleep(0.3)
    busy = Window(live, msgs, seconds)
    _all_notes_off(live)
    _check_budget("controller flood", idle, control, busy, live)
    assert n - busy.midi <= transport_losses(busy, live), "controllers vanished"  # the host drops none
    assert min(st.voices for st in busy.statuses[:-1]) > 0  # the notes rang through it
    assert busy.peak > 1e-2
    time.sleep(1.0)
    x = live.host.recorded()
    assert np.max(np.abs(x[-live.host.rate // 2:])) < SILENT, "still sounding 1 s after all notes off"
    assert abs(live.check_note(60)) < 0.2
