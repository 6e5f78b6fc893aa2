"""Fuzz targets for the MIDI file reader and the preset reader.

The same checks serve the hypothesis tests (tests/test_fuzz_readers.py) and the
coverage-guided fuzzer atheris, run by ``scripts/fuzz``::

    python tests/fuzz_targets.py midi|preset [CORPUS_DIR] [libFuzzer flags, e.g. -max_total_time=30]

What a check asserts: the reader either returns a well-formed result or raises
one of its documented errors (MidiFileError; PresetError or SettingsError, both
ValueErrors with one-line messages). Any other exception is a bug, and so is a
result that breaks the documented form (MIDI: time-ordered finite times, channel
status bytes 0x80-0xEF and data bytes 0-127, as the MIDI 1.0 Detailed
Specification defines them; presets: a save and reload gives the same sound).
"""

from __future__ import annotations

import math
import sys
import tempfile
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def check_midi(data: bytes) -> None:
    from rtvoice.offline.midifile import MAX_SECONDS, MidiFileError, parse_midi_bytes

    try:
        events = parse_midi_bytes(data, "fuzz.mid")
    except MidiFileError as err:
        assert "\n" not in str(err), "error messages are one line"
        return
    last = 0.0
    for time_s, status, d1, d2 in events:
        assert math.isfinite(time_s) and last <= time_s <= MAX_SECONDS, time_s
        assert 0x80 <= status <= 0xEF and 0 <= d1 <= 0x7F and 0 <= d2 <= 0x7F, (status, d1, d2)
        last = time_s


def check_preset(data: bytes) -> None:
    from rtvoice.engine.presets import PresetError, PresetWarning, preset_from_bytes, preset_text
    from rtvoice.engine.settings import SettingsError

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PresetWarning)
        try:
            settings = preset_from_bytes(data, "fuzz.toml")
        except (PresetError, SettingsError) as err:
            assert "\n" not in str(err), "error messages are one line"
            return
    again = preset_from_bytes(preset_text(settings).encode("utf-8"), "again.toml")
    assert again.differences(settings) == []
    assert (again.name, again.description, again.controls) == (settings.name, settings.description,
                                                                settings.controls)


TARGETS = {"midi": check_midi, "preset": check_preset}


def seed_files(target: str) -> list[Path]:
    """Valid files to start from: the demo song and the factory presets."""
    if target == "midi":
        return sorted((ROOT / "examples").glob("*.mid"))
    return sorted((ROOT / "presets").glob("*.toml"))


def main(argv: list[str]) -> None:
    import atheris
    import numpy  # noqa: F401 - imported before instrumenting: only rtvoice's own code is traced

    if len(argv) < 2 or argv[1] not in TARGETS:
        sys.exit(f"usage: {argv[0]} {'|'.join(TARGETS)} [CORPUS_DIR] [libFuzzer flags]")
    name = argv[1]
    with atheris.instrument_imports(include=["rtvoice"]):
        import rtvoice.engine.presets  # noqa: F401
        import rtvoice.engine.settings  # noqa: F401
        import rtvoice.offline.midifile  # noqa: F401
    rest = argv[2:]
    corpora = [a for a in rest if not a.startswith("-")]
    if not corpora:  # no corpus given: a temporary one
        corpora = [tempfile.mkdtemp(prefix=f"rtvoice-fuzz-{name}-")]
        rest = [*corpora, *rest]
    corpus = Path(corpora[0])
    corpus.mkdir(parents=True, exist_ok=True)
    if not any(corpus.iterdir()):  # seed an empty corpus with valid files
        for i, seed in enumerate(seed_files(name)):
            (corpus / f"seed{i}").write_bytes(seed.read_bytes())
    check = TARGETS[name]

    def one_input(data: bytes) -> None:
        check(bytes(data))

    atheris.Setup([argv[0], *rest], one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    main(sys.argv)
