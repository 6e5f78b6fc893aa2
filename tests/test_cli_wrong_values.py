"""Every option of every subcommand with a wrong value: one line on stderr, exit 2, no traceback, nothing written.

The options are discovered by walking the real argparse parser that
``rtvoice.cli.build_parser`` builds, so an option added later is covered without
editing this file -- or, if it takes free text this file has no wrong value for,
the coverage test fails and asks for one. Exit status 2 for a usage error is
common practice (argparse and POSIX utilities, e.g. the "EXIT STATUS" of grep(1)).

Each command line runs in this process through ``rtvoice.cli.main``: a traceback
would reach pytest as an exception and fail the test. Commands that would start
work with a value that slipped through are stopped by tripwires (the engine
process spawn, the benchmark runner, the survey computation): a wrong value must
fail before any of them starts, so reaching one fails the test. A few cases also
run as a real separate process.
"""

from __future__ import annotations

import argparse
import functools
import os
import subprocess
import sys
from pathlib import Path

import pytest
from support.cli import run_cli

from rtvoice.cli import build_parser
from rtvoice.engine import presets
from rtvoice.engine.settings import Settings

FACTORY_FILE = str(presets.FACTORY_DIR / "hollow-middle.toml")

# A valid command line per subcommand, so that only the option under test is wrong. {out} is a file in the
# scratch folder. `play` never gets far enough to need a device: --audio-device none and --midi-in none.
BASE = {
    ("render",): ["--note", "60", "--seconds", "0.1", "--tail-cap", "0", "-o", "{out}"],
    ("presets", "show"): ["hollow-middle"],
    ("presets", "check"): [FACTORY_FILE],
    ("play",): ["--headless", "--audio-device", "none", "--midi-in", "none", "--duration", "0.1"],
    ("bench",): ["--quick"],
    ("survey",): ["--note", "60", "--pickup", "0.1:0.2:0.05", "-o", "{out}"],
    # a take rendered by the engine (E3 on string 5, 16-bit 24 kHz) made for this check
    ("fit",): [str(Path(__file__).parent / "data" / "fit" / "e3-string5.wav"), "--string", "5"],
}

NUMBER_WRONG = ["abc", "", "nan", "inf", "-99999999", "1e999", "0x10"]
# The last: 300 bytes, over the usual file-name limit (NAME_MAX 255 on Linux, common practice).
PATH_WRONG = ["", "/no/such/folder/x.out", "{folder}", "{folder}/", "{folder}/" + "n" * 300 + ".out"]
# Wrong values for options that take free text, by argparse dest. What makes each wrong is said beside it.
TEXT_WRONG = {
    "preset": ["no-such-preset", "../../etc/passwd", "/no/such/file.toml", "", "bad name!", "{garbage}"],
    "set": ["noequals", "=3", "string.colour=3", "voices=1000", "voices=1" + "0" * 400, "pickup.0.position=nan",
            "pickup.9.position=0.2", "string.t60_low=inf", "voices=", "string.modes=[[[1]]]"],
    "output": PATH_WRONG,
    # render's second sound (A/B): as --preset and --set; B's file as -o, and B's file being A's ({out} is -o's)
    "ab": ["no-such-preset", "../../etc/passwd", "/no/such/file.toml", "", "bad name!", "{garbage}"],
    "set_b": ["noequals", "=3", "string.colour=3", "voices=1000", "pickup.0.position=nan", "pickup.9.position=0.2",
              "string.t60_low=inf", "voices=", "string.modes=[[[1]]]", "pickup.0.position=2mmm"],
    "output_b": [*PATH_WRONG, "{out}", "{folder}/" + "b" * 300 + ".wav"],
    "record": PATH_WRONG,
    "write": PATH_WRONG,
    "plot": PATH_WRONG,
    "compare_plot": PATH_WRONG,
    "audio_device": ["", "   "],  # a device is named, numbered or "none"; blank is none of them
    "midi_in": ["", "   "],
    "mpe": ["sideways", "lower=99", "lower=x", "upper=-1", "lower,,upper", "=3"],
    "client_name": ["", "a" * 100, "bad:name"],  # JACK: names up to 63 bytes, ':' separates client and port
    "pickup": ["abc", "0.1:0.2:0", "0.3:0.1:0.01", "nan", "5", "0.1:0.2", "1e999"],
    "pluck": ["abc", "0.1:0.2:-0.01", "2"],
    "width": ["abc", "-0.1", "inf"],
    "reference": ["abc", "2.0", "0.1,0.2,0.3,0.4"],
    "compare": [["abc", "0.2"], ["0.1", "9"]],
    "midifile": ["/no/such.mid", "{folder}", "{garbage}"],
    "name": ["no-such-preset", "../x", "", "{garbage}"],
    "files": ["/no/such.toml", "{garbage}"],
    "takes": ["/no/such.wav", "{folder}", "{garbage}", ""],  # fit: no file, a folder, not a WAV, no name
    "report": PATH_WRONG,
    "render": PATH_WRONG,
}
#: Positionals whose command reports per file on stdout ("error ...") by design, exit 2.
REPORTS_ON_STDOUT = {("presets", "check", "files")}


@functools.cache
def discover() -> list[tuple[tuple[str, ...], argparse.Action]]:
    """(subcommand path, action) for every option and positional of the real parser."""
    found = []

    def walk(parser: argparse.ArgumentParser, path: tuple[str, ...]) -> None:
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    walk(sub, (*path, name))
            elif not isinstance(action, argparse._HelpAction | argparse._VersionAction):
                found.append((path, action))

    walk(build_parser(), ())
    return found


def wrong_values(action: argparse.Action) -> list:
    if action.dest in TEXT_WRONG:
        return TEXT_WRONG[action.dest]
    if isinstance(action, argparse._StoreTrueAction | argparse._StoreFalseAction):
        return ["=yes"]  # a flag takes no value
    if action.choices:
        return ["no-such-choice", ""]
    if action.type is not None:
        return NUMBER_WRONG
    return []


def cases():
    out = []
    for path, action in discover():
        label = action.option_strings[-1] if action.option_strings else action.dest
        out.append(pytest.param(path, action.dest, id=f"{' '.join(path)} {label}"))
    return out


def test_every_option_has_wrong_values_and_a_base_command():
    missing = [f"{' '.join(p)} {a.option_strings or a.dest}" for p, a in discover() if not wrong_values(a)]
    assert missing == [], f"add wrong values for {missing} to TEXT_WRONG"
    paths = {p for p, _ in discover()}
    no_options = {("presets", "list"), ("devices",)}
    assert paths - set(BASE) <= no_options, f"add a valid base command for {paths - set(BASE) - no_options}"
    assert sum(len(wrong_values(a)) for _, a in discover()) >= 150


def command_line(path, dest, value, scratch: Path) -> list[str]:
    """BASE[path] with the option ``dest`` (removed from the base first) set to ``value``."""
    action = next(a for p, a in discover() if p == path and a.dest == dest)
    fill = {"out": str(scratch / "out.file"), "folder": str(scratch), "garbage": str(scratch / "garbage.bin")}
    values = [value] if isinstance(value, str) else list(value)
    values = [v.format(**fill) for v in values]
    base = [v.format(**fill) for v in BASE[path]]
    if not action.option_strings:  # a positional replaces the base's positional (render: the --note)
        base = {("render",): ["-o", fill["out"]], ("presets", "show"): [], ("presets", "check"): [],
                ("fit",): ["--string", "5"]}[path]
        return [*path, *values, *base]
    cleaned, skip = [], 0
    for i, token in enumerate(base):
        if skip:
            skip -= 1
            continue
        if token in action.option_strings:
            skip = 0 if action.nargs == 0 else (action.nargs if isinstance(action.nargs, int) else 1)
            continue
        cleaned.append(token)
        del i
    option = action.option_strings[-1]
    if values == ["=yes"]:
        return [*path, *cleaned, option + "=yes"]
    return [*path, *cleaned, option, *values]


@pytest.fixture()
def scratch(tmp_path, monkeypatch):
    """An empty working folder and user folder; the tripwires; the garbage file."""
    work = tmp_path / "work"
    work.mkdir()
    home = tmp_path / "home"
    monkeypatch.setenv("RTVOICE_HOME", str(home))
    presets.save_preset(Settings.defaults().with_values({"voices": 3}), "mine")
    monkeypatch.chdir(work)
    (tmp_path / "garbage.bin").write_bytes(b"\x00\xffnot a midi file nor a preset\x01")

    def tripwire(what):
        def fail(*args, **kwargs):
            raise AssertionError(f"a wrong value got as far as starting {what}")

        return fail

    # Fakes, on purpose: these calls are where real work (an engine process, minutes of benchmarks, a
    # survey) would begin; a wrong value must be refused before any of them, so each only fails the test.
    from rtvoice.bench import runner
    from rtvoice.commands import survey as survey_commands
    from rtvoice.host import link

    monkeypatch.setattr(link.EngineLink, "_spawn", tripwire("the engine process"))
    monkeypatch.setattr(link.EngineLink, "start", tripwire("the engine process"))
    monkeypatch.setattr(runner, "run", tripwire("the benchmarks"))
    monkeypatch.setattr(survey_commands, "survey", tripwire("the survey"))
    import rtvoice.host.headless as headless

    monkeypatch.setattr(headless, "run_headless", tripwire("headless play"))
    return tmp_path


def listing(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize(("path", "dest"), cases())
def test_wrong_values_are_one_line_exit_2_nothing_written(scratch, capsys, path, dest):
    action = next(a for p, a in discover() if p == path and a.dest == dest)
    problems = []
    for value in wrong_values(action):
        argv = command_line(path, dest, value, scratch)
        problem = run_wrong(argv, (*path, dest) in REPORTS_ON_STDOUT, scratch, capsys)
        if problem:
            problems.append(f"{argv}: {problem}")
    assert problems == []


def run_wrong(argv: list[str], on_stdout: bool, scratch: Path, capsys) -> str:
    """What is wrong with how ``rtvoice ARGV`` refused its wrong value ('' when nothing)."""
    before = listing(scratch)
    code, out, err = run_cli(argv, capsys)
    if code != 2:
        return f"exit {code}, stdout {out!r}, stderr {err!r}"
    lines = (out if on_stdout else err).strip().splitlines()
    if len(lines) != 1 or "error" not in lines[0] or "Traceback" in err:
        return f"expected one error line on {'stdout' if on_stdout else 'stderr'}, got {out + err!r}"
    if listing(scratch) != before:
        return "it wrote something"
    return ""


@pytest.mark.parametrize("argv", [
    ["render", "--note", "60", "-o", "x.wav", "--set", "voices=1" + "0" * 400],
    ["play", "--headless", "--audio-device", "none", "--midi-in", "none", "--client-name", "bad:name"],
])
def test_as_a_separate_process(tmp_path, argv):
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", RTVOICE_HOME=str(tmp_path / "home"))
    r = subprocess.run([sys.executable, "-m", "rtvoice.cli", *argv], capture_output=True, text=True, cwd=tmp_path,
                       env=env, timeout=60)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr, r.stderr
    assert list(tmp_path.iterdir()) == []
