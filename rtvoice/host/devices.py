"""``rtvoice devices``: audio outputs, MIDI inputs, and what ``rtvoice play`` would use."""

from __future__ import annotations

from rtvoice.host import jackinfo
from rtvoice.host.audio import find_device, load_sounddevice, output_devices
from rtvoice.host.errors import HostError
from rtvoice.host.link import DEFAULT_CLIENT_NAME
from rtvoice.host.midi_ports import MidiInputs, api_name, choose_api, load_rtmidi
from rtvoice.host.rates import choose_rate


def audio_lines() -> tuple[list[str], str]:
    sd, reason = load_sounddevice()
    if sd is None:
        return [f"  {reason}"], "none (silent clock)"
    devices = output_devices(sd)
    try:
        default = find_device(sd, None)
    except HostError:
        default = None
    lines = []
    for d in devices:
        mark = "*" if default is not None and d["index"] == default["index"] else " "
        lines.append(f" {mark}{d['index']:3d}  {d['name']}  [{d['hostapi_name']}]  {d['max_output_channels']} ch, "
                     f"{d['default_samplerate']:.0f} Hz, latency {1000 * d['default_low_output_latency']:.1f}"
                     f"-{1000 * d['default_high_output_latency']:.1f} ms")
    if not lines:
        lines.append("  no audio output devices: rtvoice play runs on a silent clock")
    used = "none (silent clock)"
    if default is not None:
        used = f"{default['name']} ({default['hostapi_name']}) at {choose_rate(None, default).reason}"
    return lines, used


def midi_lines() -> tuple[list[str], str]:
    rtmidi = load_rtmidi()
    if rtmidi is None:
        return ["  python-rtmidi cannot load: pip install python-rtmidi"], "none"
    inputs = MidiInputs("all", DEFAULT_CLIENT_NAME)
    inputs.rtmidi = rtmidi
    inputs.api = choose_api(rtmidi)
    try:
        names = inputs.available()
        opened = set(inputs.wanted(names))
    except Exception as err:  # noqa: BLE001 - no MIDI system at all
        return [f"  cannot list MIDI inputs: {err}"], "none"
    finally:
        inputs.close()
    lines = [f"  API: {api_name(rtmidi, inputs.api)}"]
    for n in names:
        lines.append(f" {'*' if n in opened else ' '} {n}" + ("" if n in opened else "  (open with --midi-in NAME)"))
    if not names:
        lines.append("  no MIDI inputs found (ports that appear later are opened while playing)")
    used = ", ".join(sorted(opened)) if opened else "no hardware inputs"
    return lines, f"{used} + virtual port {inputs.virtual_name}"


def device_report() -> str:
    audio, audio_used = audio_lines()
    midi, midi_used = midi_lines()
    out = ["Audio outputs (PortAudio; * = default):", *audio, "", "MIDI inputs (* = opened by default):", *midi, ""]
    fmt = jackinfo.server_format()
    if fmt:
        out.append(f"JACK server: {fmt[0]} Hz, {fmt[1]}-frame period")
    out.append(f"rtvoice play would use: audio -> {audio_used}; MIDI <- {midi_used}")
    return "\n".join(out) + "\n"
