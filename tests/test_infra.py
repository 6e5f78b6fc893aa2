"""Checks of the test infrastructure itself: the JACK server, the port helpers and the
record path (PortAudio -> JACK -> jack_capture -> WAV) that the audio tests rely on."""

import numpy as np
import pytest
from support.capture import record
from support.jack_server import (
    JackError,
    JackServerInfo,
    connect,
    connections,
    disconnect,
    list_ports,
    portaudio_jack_output_device,
    sample_rate_hz,
    wait_for_new_ports,
    wait_for_ports,
)

SINE_HZ = 1000.0
SINE_AMPLITUDE = 0.1  # -20 dBFS: quiet, well under the -1 dBFS ceiling
RECORD_S = 1.0


def _dominant_frequency_hz(samples: np.ndarray, rate_hz: float, *, zero_pad: int = 8) -> float:
    """Estimate the frequency in Hz of the strongest spectral peak of a mono signal.

    Hann window, FFT zero-padded ``zero_pad`` times, then a parabola through the log magnitude
    of the peak bin and its neighbours (common practice). For a clean sine of one second the
    error is far below 0.1 Hz.
    """
    x = np.asarray(samples, dtype=np.float64).reshape(-1)
    if x.size < 8:
        raise ValueError("need at least 8 samples")
    n_fft = x.size * zero_pad
    magnitude = np.abs(np.fft.rfft(x * np.hanning(x.size), n=n_fft))
    k = int(np.argmax(magnitude[1:-1])) + 1
    a, b, c = np.log(magnitude[k - 1 : k + 2] + 1e-300)
    denom = a - 2.0 * b + c
    offset = 0.5 * (a - c) / denom if denom != 0 else 0.0
    return float((k + offset) * rate_hz / n_fft)


def test_dominant_frequency_estimator_on_known_sine() -> None:
    """The estimator used below finds a sine between FFT bins (Hann + parabolic
    interpolation, common practice), so a wrong estimator cannot hide a wrong recording."""
    rate_hz = 48_000
    t_s = np.arange(rate_hz) / rate_hz
    for f_hz in (997.3, 1000.0, 1234.5):
        x = 0.1 * np.sin(2 * np.pi * f_hz * t_s + 0.7)
        assert _dominant_frequency_hz(x, rate_hz) == pytest.approx(f_hz, abs=0.05)


@pytest.mark.jack
def test_server_answers_with_playback_ports(jack_server: JackServerInfo) -> None:
    """The server answers and offers physical playback ports, the default sink of clients."""
    playback = list_ports(r"^system:playback_\d+$", direction="input", physical=True)
    assert len(playback) >= 1, list_ports()
    assert set(playback) <= set(jack_server.ports)
    assert sample_rate_hz() == jack_server.sample_rate_hz > 0
    assert jack_server.buffer_frames > 0


@pytest.mark.jack
def test_wait_for_ports_finds_and_times_out(jack_server: JackServerInfo) -> None:
    """wait_for_ports returns existing ports at once and raises TimeoutError for absent ones."""
    found = wait_for_ports(r"^system:playback_", count=1, timeout_s=2.0)
    assert found and all(name.startswith("system:playback_") for name in found)
    with pytest.raises(TimeoutError, match="no-such-client"):
        wait_for_ports(r"^no-such-client:", timeout_s=0.3)


@pytest.mark.jack
def test_connect_and_disconnect(jack_server: JackServerInfo) -> None:
    """jack_connect / jack_disconnect change what jack_lsp -c reports."""
    source = list_ports(r"^system:capture_", direction="output")[-1]
    sink = list_ports(r"^system:playback_", direction="input")[-1]
    was_connected = sink in connections().get(source, [])
    if was_connected:
        disconnect(source, sink)
    try:
        assert sink not in connections().get(source, [])
        connect(source, sink)
        assert sink in connections()[source]
        assert source in connections()[sink]
        disconnect(source, sink)
        assert sink not in connections().get(source, [])
    finally:
        if was_connected and sink not in connections().get(source, []):
            connect(source, sink)


@pytest.mark.jack
def test_recording_of_unknown_port_is_refused(
    jack_server: JackServerInfo, tmp_path
) -> None:
    """jack_capture only warns about a missing port; the helper must raise instead."""
    with pytest.raises(JackError, match="unknown ports"):
        record(["no-such-client:out_1"], 0.5, tmp_path / "never.wav")


@pytest.mark.jack
def test_sine_from_portaudio_is_recorded_by_jack_capture(
    jack_server: JackServerInfo, tmp_path
) -> None:
    """Play a 1 kHz sine through sounddevice on the JACK host API for longer than 1 s, record
    the stream's JACK output port with jack_capture for 1 s and measure the WAV:
    frequency within 2 Hz of 1 kHz (common practice), float level unchanged, full length."""
    try:
        import sounddevice as sd
    except OSError as exc:
        pytest.fail(f"sounddevice cannot load PortAudio ({exc}); apt-get install libportaudio2")

    rate_hz = jack_server.sample_rate_hz
    # One second of sine holds a whole number of 1 kHz periods at 44.1/48/96 kHz: loops cleanly.
    table = (SINE_AMPLITUDE * np.sin(2 * np.pi * SINE_HZ * np.arange(rate_hz) / rate_hz)).astype(
        np.float32
    )
    position = 0
    statuses: list[str] = []  # PortAudio underflow notes, shown if a check fails

    def callback(outdata: np.ndarray, frames: int, _time, status) -> None:
        nonlocal position
        if status:
            statuses.append(str(status))
        outdata[:, 0] = np.take(table, np.arange(position, position + frames), mode="wrap")
        position = (position + frames) % rate_hz

    device = portaudio_jack_output_device()
    before = set(list_ports())
    stream = sd.OutputStream(
        device=device, samplerate=rate_hz, channels=1, dtype="float32", callback=callback
    )
    with stream:
        ports = wait_for_new_ports(before, direction="output", timeout_s=5.0)
        assert len(ports) == 1, ports
        samples, got_rate_hz = record(ports, RECORD_S, tmp_path / "sine.wav")
    assert got_rate_hz == rate_hz
    assert samples.shape[1] == 1
    assert abs(samples.shape[0] - RECORD_S * rate_hz) <= jack_server.buffer_frames, samples.shape
    x = samples[:, 0]
    assert _dominant_frequency_hz(x, rate_hz) == pytest.approx(SINE_HZ, abs=2.0)
    # Float samples pass PortAudio and JACK untouched: same peak level (1 % slack).
    assert float(np.max(np.abs(x))) == pytest.approx(SINE_AMPLITUDE, rel=0.01)
    # A continuous sine, not bursts: RMS close to A/sqrt(2) and energy concentrated at 1 kHz.
    rms = float(np.sqrt(np.mean(x.astype(np.float64) ** 2)))
    assert rms == pytest.approx(SINE_AMPLITUDE / np.sqrt(2), rel=0.1), (rms, statuses)
    spectrum = np.abs(np.fft.rfft(x * np.hanning(x.size))) ** 2
    freqs_hz = np.fft.rfftfreq(x.size, 1.0 / rate_hz)
    near = np.abs(freqs_hz - SINE_HZ) <= 20.0
    assert spectrum[near].sum() / spectrum.sum() > 0.9, statuses
