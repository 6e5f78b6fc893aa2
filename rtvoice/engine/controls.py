"""Controller mapping: MIDI controllers drive schema parameters.

Each entry maps one source over a range [low, high] of one parameter:

- ``cc``: a control change, 7-bit, or a 14-bit pair (``bits = 14``): MSB on CC 0-31 with its
  LSB on CC+32 (MIDI 1.0 Detailed Specification, "Control Change"). An LSB refines the last
  MSB of its channel, (MSB * 128 + LSB) / 16383; an MSB alone reads as a 7-bit value, so a
  7-bit controller on a 14-bit entry still reaches both ends of the range.
- ``pressure``: channel pressure, on any channel that is not an MPE member channel.
- ``note_timbre`` / ``note_pressure``: CC74 / channel pressure on an MPE member channel
  (MIDI Polyphonic Expression, MMA/AMEI 2018), which set the excitation of the note
  started on that channel, so each note can be plucked at its own place.

The default map follows common controller conventions (common practice): the
modulation wheel moves the pickup, channel volume sets the output gain, the sound
controllers 71/72/74 (harmonic content, release time, brightness) set the
resonance Q, the release T60 and the resonance frequency, general-purpose
controllers 16-18 set the pluck position and widths, 19 the fretting hand, and in MPE the per-note
timbre axis (CC74) sets where each note is plucked.

Entries are plain dicts (the form of the preset's ``[[control]]`` tables):
``{"target": name, "source": "cc", "cc": 1, "bits": 14, "channel": 1..16 (absent: any),
"low": ..., "high": ..., "curve": "linear" | "log"}``. The map itself
(:class:`ControlMap`) keeps no Settings: it turns controller values into
(name, value) changes, which its owner applies.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from rtvoice.engine import midi
from rtvoice.engine.schema import SettingsError, lookup

SOURCES = ("cc", "pressure", "note_timbre", "note_pressure")
PER_NOTE_SOURCES = ("note_timbre", "note_pressure")
PER_NOTE_TARGETS = ("excitation.position", "excitation.width")
CURVES = ("linear", "log")
#: Controllers the engine itself interprets (RPN/NRPN and data entry, sustain) or that are
#: channel mode messages (120-127): never mapped.
RESERVED_CCS = frozenset({
    midi.CC_DATA_ENTRY_MSB, midi.CC_DATA_ENTRY_LSB, midi.CC_SUSTAIN, midi.CC_NRPN_LSB, midi.CC_NRPN_MSB,
    midi.CC_RPN_LSB, midi.CC_RPN_MSB, *range(120, 128),
})
_KEYS = ("target", "source", "cc", "bits", "channel", "low", "high", "curve")


def _error(key: str, value: Any, reason: str, source: str) -> Exception:
    return SettingsError(key, value, reason, source)


def _entry(target: str, cc: int | None = None, *, source: str = "cc", bits: int = 7,
           low: float | None = None, high: float | None = None, curve: str | None = None) -> dict[str, Any]:
    e: dict[str, Any] = {"target": target, "source": source}
    if cc is not None:
        e["cc"], e["bits"] = cc, bits
    if low is not None:
        e["low"], e["high"] = low, high
    if curve is not None:
        e["curve"] = curve
    return e


DEFAULT_ENTRIES: tuple[dict[str, Any], ...] = (
    # Places along the string reach 0.27 of the scale (175 mm on 648): just short of the 22nd fret, the
    # end of the default neck; a controller carries them no further than a shorter neck's last fret.
    _entry("pickup.0.position", 1, bits=14, low=0.03, high=0.27),  # modulation wheel (CC1/33)
    _entry("output.gain_db", 7, bits=14, low=-60.0, high=0.0),  # channel volume (CC7/39)
    _entry("electronics.resonance_hz", 74, low=1000.0, high=12000.0, curve="log"),  # brightness
    _entry("electronics.q", 71, low=0.5, high=8.0, curve="log"),  # harmonic content
    _entry("string.release", 72, low=0.02, high=4.0, curve="log"),  # release time
    _entry("excitation.position", 16, low=0.02, high=0.27),  # general purpose 1
    _entry("excitation.width", 17, low=0.0, high=0.1),  # general purpose 2
    _entry("pickup.0.width", 18, low=0.0, high=0.1),  # general purpose 3
    _entry("hand.fret", 19, low=0.0, high=12.0),  # general purpose 4: the fretting hand, nut to 12th fret
    _entry("excitation.position", source="note_timbre", low=0.05, high=0.27),  # MPE per-note CC74
)


def default_entries() -> list[dict[str, Any]]:
    """The default controller map, normalised."""
    return check_entries(DEFAULT_ENTRIES, source="default map")


def check_entries(entries: Iterable[Mapping[str, Any]], source: str = "") -> list[dict[str, Any]]:
    """Validate controller-map entries and fill in defaults; raises SettingsError naming the entry."""
    if isinstance(entries, Mapping | str | bytes):
        raise _error("control", entries, "expected a list of [[control]] tables", source)
    out = []
    for i, raw in enumerate(entries):
        if not isinstance(raw, Mapping):
            raise _error(f"control.{i}", raw, "expected a table", source)
        out.append(_check_one(i, raw, source))
    return out


def _check_one(i: int, raw: Mapping[str, Any], source: str) -> dict[str, Any]:
    where = f"control.{i}"
    for key in raw:
        if key not in _KEYS:
            raise _error(f"{where}.{key}", raw[key], f"unknown key (allowed: {', '.join(_KEYS)})", source)
    target = raw.get("target")
    if not isinstance(target, str):
        raise _error(f"{where}.target", target, "expected a parameter name like pickup.0.position", source)
    try:
        param, _ = lookup(target)
    except KeyError as err:
        raise _error(f"{where}.target", target, str(err.args[0]), source) from None
    if param.kind == "shape":
        raise _error(f"{where}.target", target, "a breakpoint shape cannot follow a controller", source)
    if param.structural:
        raise _error(f"{where}.target", target, "changes the voice pool; set it in the sound instead", source)
    if target.startswith("strings."):
        raise _error(f"{where}.target", target, "a string's build cannot follow a controller; set it in the sound "
                     "instead", source)
    src = raw.get("source", "cc")
    if src not in SOURCES:
        raise _error(f"{where}.source", src, f"expected one of {', '.join(SOURCES)}", source)
    if src in PER_NOTE_SOURCES and target not in PER_NOTE_TARGETS:
        raise _error(f"{where}.target", target,
                     f"per-note control sets the excitation: {' or '.join(PER_NOTE_TARGETS)}", source)
    entry: dict[str, Any] = {"target": target, "source": src}
    if src == "cc":
        cc = raw.get("cc")
        if isinstance(cc, bool) or not isinstance(cc, int) or not 0 <= cc <= 119:
            raise _error(f"{where}.cc", cc, "expected a controller number 0..119", source)
        if cc in RESERVED_CCS:
            raise _error(f"{where}.cc", cc, "the engine uses this controller itself (RPN, data entry, sustain)",
                         source)
        bits = raw.get("bits", 7)
        if bits not in (7, 14):
            raise _error(f"{where}.bits", bits, "expected 7 or 14", source)
        if bits == 14 and cc >= 32:
            raise _error(f"{where}.bits", bits, "14-bit pairs have their MSB on CC 0..31 (LSB on CC+32)", source)
        if bits == 14 and cc + 32 in RESERVED_CCS:
            raise _error(f"{where}.bits", bits, f"CC{cc + 32} (the LSB) is used by the engine", source)
        entry["cc"], entry["bits"] = cc, bits
    elif "cc" in raw or "bits" in raw:
        raise _error(f"{where}.cc", raw.get("cc"), "only a 'cc' source has a controller number", source)
    if "channel" in raw:
        ch = raw["channel"]
        if isinstance(ch, bool) or not isinstance(ch, int) or not 1 <= ch <= 16:
            raise _error(f"{where}.channel", ch, "expected a MIDI channel 1..16 (leave it out for any)", source)
        entry["channel"] = ch
    if param.kind == "choice" or param.choices:
        if "low" in raw or "high" in raw or "curve" in raw:
            raise _error(f"{where}.low", raw.get("low"), "a choice is spread over the controller's travel; "
                         "low, high and curve do not apply", source)
        return entry
    low = raw.get("low", param.low)
    high = raw.get("high", param.high)
    for key, v in (("low", low), ("high", high)):
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise _error(f"{where}.{key}", v, "expected a number", source)
        try:
            param.check(float(v) if param.kind == "float" else round(v))
        except ValueError as err:
            raise _error(f"{where}.{key}", v, f"{err} (allowed: {param.describe_range()})", source) from None
    curve = raw.get("curve", "log" if param.log_scale and low > 0 and high > 0 else "linear")
    if curve not in CURVES:
        raise _error(f"{where}.curve", curve, f"expected one of {', '.join(CURVES)}", source)
    if curve == "log" and not (low > 0 and high > 0):
        raise _error(f"{where}.curve", curve, "a log curve needs low and high above 0", source)
    entry.update(low=float(low), high=float(high), curve=curve)
    return entry


def scale(entry: Mapping[str, Any], x: float) -> Any:
    """The parameter value for controller position ``x`` in [0, 1]."""
    param, _ = lookup(entry["target"])
    x = min(max(float(x), 0.0), 1.0)
    if param.kind == "choice" or param.choices:
        choices = param.choices
        return choices[min(int(x * len(choices)), len(choices) - 1)]
    lo, hi = entry["low"], entry["high"]
    value = lo * (hi / lo) ** x if entry["curve"] == "log" else lo + (hi - lo) * x
    value = min(max(value, param.low), param.high)
    return round(value) if param.kind == "int" else value


def learned_entry(target: str, cc: int, channel: int) -> dict[str, Any]:
    """The entry made when controller ``cc`` on ``channel`` (0-15) is moved while learning ``target``."""
    return _check_one(0, {"target": target, "cc": cc, "bits": 14 if cc < 32 and cc + 32 not in RESERVED_CCS
                          else 7, "channel": channel + 1}, "learn")


class ControlMap:
    """Turns controller messages into parameter changes; also learns new entries.

    Made to run inside the audio callback: lookups are by table, no I/O, no locks.
    ``learned`` holds the entry made by the last completed learn until the owner clears it.
    """

    def __init__(self, entries: Iterable[Mapping[str, Any]] | None = None):
        self.learning: str | None = None
        self.learned: dict[str, Any] | None = None
        self._msb = [[-1] * 32 for _ in range(16)]  # last MSB of each 14-bit pair, per channel
        self._note_timbre: list[float | None] = [None] * 16
        self._note_pressure: list[float | None] = [None] * 16
        self.set_entries(default_entries() if entries is None else entries)

    def set_entries(self, entries: Iterable[Mapping[str, Any]]) -> None:
        self.entries = check_entries(entries, source="controls")
        by_cc: dict[int, list[tuple[dict[str, Any], str]]] = {}
        for e in self.entries:
            if e["source"] == "cc":
                by_cc.setdefault(e["cc"], []).append((e, "msb" if e["bits"] == 14 else "7"))
                if e["bits"] == 14:
                    by_cc.setdefault(e["cc"] + 32, []).append((e, "lsb"))
        self._by_cc = by_cc
        self._pressure = [e for e in self.entries if e["source"] == "pressure"]
        self._per_note = [e for e in self.entries if e["source"] in PER_NOTE_SOURCES]

    def to_dicts(self) -> list[dict[str, Any]]:
        return [dict(e) for e in self.entries]

    def learn(self, target: str | None) -> None:
        if target is not None:
            learned_entry(target, 1, 0)  # validates the target
        self.learning = target

    # -- messages -----------------------------------------------------------------------
    def control_change(self, channel: int, cc: int, value: int, member: bool = False) -> list[tuple[str, Any]]:
        """Changes for CC ``cc`` = ``value`` on ``channel`` (0-15); ``member``: an MPE member channel."""
        if member and cc == midi.CC_TIMBRE:
            self._note_timbre[channel] = value / 127.0
            return []
        if self.learning is not None and cc not in RESERVED_CCS and not (32 <= cc < 64 and self._pairs_lsb(cc)):
            self._learn(channel, cc)
        out = []
        for e, role in self._by_cc.get(cc, ()):
            ch = e.get("channel")
            if ch is not None and ch - 1 != channel:
                continue
            if role == "7":
                x = value / 127.0
            elif role == "msb":
                self._msb[channel][cc] = value
                x = value / 127.0  # alone it reads as 7 bits, so 7-bit controllers reach both ends
            else:
                msb = self._msb[channel][cc - 32]
                if msb < 0:
                    continue  # an LSB before any MSB says nothing on its own
                x = ((msb << 7) | value) / 16383.0
            out.append((e["target"], scale(e, x)))
        return out

    def pressure(self, channel: int, value01: float, member: bool = False) -> list[tuple[str, Any]]:
        """Changes for channel pressure ``value01`` in [0, 1] on ``channel``."""
        if member:
            self._note_pressure[channel] = value01
            return []
        return [(e["target"], scale(e, value01)) for e in self._pressure
                if e.get("channel") is None or e["channel"] - 1 == channel]

    def note_values(self, channel: int) -> dict[str, Any]:
        """Per-note parameter values for a note starting on MPE member ``channel`` (empty when none)."""
        out: dict[str, Any] = {}
        for e in self._per_note:
            x = self._note_timbre[channel] if e["source"] == "note_timbre" else self._note_pressure[channel]
            if x is not None and (e.get("channel") is None or e["channel"] - 1 == channel):
                out[e["target"]] = scale(e, x)
        return out

    def reset_channel(self, channel: int) -> None:
        """Forget per-note values of ``channel`` (Reset All Controllers)."""
        self._note_timbre[channel] = self._note_pressure[channel] = None
        self._msb[channel] = [-1] * 32

    def _pairs_lsb(self, cc: int) -> bool:
        return any(role == "lsb" for _, role in self._by_cc.get(cc, ()))

    def _learn(self, channel: int, cc: int) -> None:
        assert self.learning is not None  # only called while learning
        entry = learned_entry(self.learning, cc, channel)
        kept = [e for e in self.entries if not self._replaced_by(e, entry, channel)]
        self.set_entries(kept + [entry])
        self.learning = None
        self.learned = entry

    @staticmethod
    def _replaced_by(old: dict[str, Any], new: dict[str, Any], channel: int) -> bool:
        """A learned entry replaces what drove the same parameter and what the same controller drove."""
        if old["target"] == new["target"] and old["source"] in ("cc", "pressure"):
            return True
        if old["source"] != "cc" or old.get("channel") not in (None, channel + 1):
            return False
        cc = new["cc"]
        replaced: bool = old["cc"] == cc or (old["bits"] == 14 and old["cc"] + 32 == cc)
        return replaced
