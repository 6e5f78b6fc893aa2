"""Presets: the factory set, validation messages, atomic saving, safe names, data only."""

import ast
import os
import tomllib
from pathlib import Path

import pytest

from rtvoice.engine import presets
from rtvoice.engine.presets import PresetError
from rtvoice.engine.settings import Settings, SettingsError


@pytest.fixture(autouse=True)
def user_home(tmp_path, monkeypatch):
    monkeypatch.setenv("RTVOICE_HOME", str(tmp_path))
    return tmp_path


def test_factory_presets_are_valid_distinct_and_at_least_eight():
    factory = [p for p in presets.list_presets() if p.origin == "factory"]
    assert len(factory) >= 8
    loaded = [presets.read_preset_file(p.path) for p in factory]
    scales = {s.get("string.scale_length_mm") for s in loaded}
    layouts = {(s.get("excitation.position"), tuple(p["position"] for p in s.pickups)) for s in loaded}
    assert len(scales) >= 5 and len(layouts) == len(loaded)
    assert all(s.description for s in loaded)


def test_save_then_load_round_trips(user_home):
    # pickup 2 at 0.27 of the scale (175 mm): within the default neck, whose 22nd fret lies 181.8 mm from
    # the saddle (12-TET fret rule, common practice)
    s = Settings.defaults().with_values({"pickup.1.position": 0.27, "excitation.shape": [[0.2, 0.5], [0.4, 1.0]]})
    path = presets.save_preset(s, "my-sound")
    assert path.parent == user_home / "presets"
    back = presets.load_preset("my-sound")
    assert back.differences(s) == [] and back.name == "my-sound"
    assert not [p for p in path.parent.iterdir() if p.name.startswith(".")]  # no temporary files left


def test_save_replaces_atomically(user_home):
    presets.save_preset(Settings.defaults(), "a")
    before = os.stat(user_home / "presets" / "a.toml").st_ino
    presets.save_preset(Settings.defaults().with_values({"voices": 8}), "a")
    after = user_home / "presets" / "a.toml"
    assert os.stat(after).st_ino != before  # a new file renamed over the old, not rewritten in place
    assert presets.load_preset("a").get("voices") == 8


@pytest.mark.parametrize("name", ["../x", "a/b", "", ".hidden", "x" * 65, "semi;colon", "sp ace"])
def test_unsafe_names_are_refused(name):
    with pytest.raises(PresetError, match="not allowed"):
        presets.save_preset(Settings.defaults(), name)


def test_factory_presets_cannot_be_overwritten_or_deleted():
    with pytest.raises(PresetError, match="factory"):
        presets.save_preset(Settings.defaults(), "hollow-middle")
    with pytest.raises(PresetError, match="factory"):
        presets.delete_preset("hollow-middle")


def test_rename_and_delete(user_home):
    presets.save_preset(Settings.defaults(), "one")
    presets.rename_preset("one", "two")
    assert presets.load_preset("two").name == "two"
    with pytest.raises(PresetError):
        presets.load_preset("one")
    presets.delete_preset("two")
    assert not (user_home / "presets" / "two.toml").exists()


# Every kind of bad preset file issue 7 lists. Expectations: TOML 1.0 (toml.io, 2021) for what is valid
# TOML -- a duplicate key, an unterminated string and integers beyond 64 bits are errors there; the
# schema (rtvoice/engine/schema.py) for names, types and ranges; "finite" because nan/inf are no
# physical quantity (common practice).
BAD = [
    # -- empty --
    ("", "empty file"),
    ("   \n\t\n", "empty file"),
    # -- binary garbage --
    (b"\x00\xff\xfe garbage", "not a text file"),
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "not a text file"),
    (bytes(range(256)), "not a text file"),
    ("\x00\x01\x02 voices = 3", "not valid TOML"),  # valid UTF-8, but control characters
    # -- invalid TOML --
    ("[string\nmodes = 3", "not valid TOML"),
    ("voices = 4\nvoices = 5", "not valid TOML"),
    ('description = "never closed', "not valid TOML"),
    ("[string]\nmodes = 3 4", "not valid TOML"),
    ("a = " + "[" * 2000 + "]" * 2000, "nested too deeply"),  # tomllib would recurse past Python's limit
    ("a = " + "[" * 40 + "]" * 40, "nested more than 32"),
    # -- wrong types --
    ("[string]\nmodes = 'many'", "string.modes"),
    ('[string]\nt60_low = "6"', "expected a number"),
    ("[string]\nt60_low = [1.0]", "expected a number"),
    ("[string]\nt60_low = 1979-05-27", "expected a number"),
    ("[output]\ngain_db = true", "expected a number"),
    ("string = 3", "expected a [string] table"),
    ("[[string]]\nmodes = 3", "expected a [string] table"),
    ("voices = true", "whole number"),
    ('voices = "16"', "whole number"),
    ("name = 5", "expected text"),
    ('description = ["x"]', "expected text"),
    ("[excitation]\nkind = 1", "expected one of"),
    ("[excitation]\nshape = 'triangle'", "list of [x, y]"),
    ("pickup = 3", "expected [[pickup]]"),
    ("[pickup]\nposition = 0.2", "expected [[pickup]]"),
    ("control = 5", "expected [[control]]"),
    ('format = "1"', "format"),
    ("format = 1.5", "format"),
    # -- unknown keys --
    ("[string]\ncolour = 3", "unknown parameter"),
    ("volume = 3", "unknown key"),
    ("[reverb]\nmix = 0.5", "unknown parameter"),
    ("[[pickup]]\nhum = 1", "unknown key"),
    ("format = 1\n[string]\ncolour = 3", "unknown parameter"),  # our own format: unknown = a typo
    # -- out of range --
    ("[string]\nmodes = 0", "out of range"),
    ("[string]\nmodes = -1", "out of range"),
    ("[string]\nt60_low = 1.0\nt60_high = 2.0", "must not exceed"),
    ("[excitation]\nkind = 'bow'", "expected one of"),
    ("[excitation]\nshape = [[1.5, 0.2]]", "strictly between"),
    ("[[pickup]]\nposition = 1.2", "pickup.0.position"),
    ("[[pickup]]\nposition = -0.1", "out of range"),
    ("[[pickup]]\nsensing = 'magic'", "expected one of"),
    ("[[pickup]]\npolarity = 2", "expected one of"),
    ("[[pickup]]\n[[pickup]]\n[[pickup]]\n[[pickup]]\n[[pickup]]", "between 1 and 4"),
    ("[output]\ngain_db = 100", "out of range"),
    ("voices = 0", "out of range"),
    ("voices = 1000", "out of range"),
    ("format = 0", "format"),
    ("format = -3", "format"),
    ('description = "' + "x" * 3000 + '"', "at most 2000 characters"),
    # -- nan, inf, 1e308, huge integers --
    ("[string]\nt60_low = nan", "finite"),
    ("[string]\nt60_low = inf", "finite"),
    ("[output]\ngain_db = -inf", "finite"),
    ("[[pickup]]\nlevel_db = nan", "finite"),
    ("[excitation]\nshape = [[0.5, nan]]", "finite"),
    ("[string]\nt60_low = 1e308", "out of range"),
    ("[output]\ngain_db = -1e308", "out of range"),
    ("voices = 1e308", "out of range"),
    ("voices = 1" + "0" * 30, "beyond 64 bits"),
    ("[string]\nt60_low = -1" + "0" * 400, "beyond 64 bits"),
    # -- huge file --
    ("# " + "x" * (presets.MAX_PRESET_BYTES + 10), "larger"),
]


@pytest.fixture()
def saved(user_home):
    """Two user presets saved before each bad load: their bytes must not change."""
    presets.save_preset(Settings.defaults().with_values({"voices": 5}), "kept-one")
    presets.save_preset(Settings.defaults().with_values({"string.modes": 40}), "kept-two")
    folder = user_home / "presets"
    return folder, snapshot(folder)


def snapshot(folder):
    return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in sorted(folder.iterdir())}


def test_the_bad_table_covers_at_least_twenty_cases():
    assert len(BAD) >= 20


@pytest.mark.parametrize(("content", "needle"), BAD)
def test_bad_preset_files_are_refused_with_a_clear_message(tmp_path, saved, content, needle):
    folder, before = saved
    data = content if isinstance(content, bytes) else content.encode()
    for path in (tmp_path / "bad.toml", folder / "bad.toml"):  # given as a path, and found by name
        path.write_bytes(data)
        with pytest.raises((PresetError, SettingsError)) as info:
            presets.read_preset_file(path) if path.parent == tmp_path else presets.load_preset("bad")
        message = str(info.value)
        assert needle in message
        assert str(path) in message
        assert "\n" not in message.strip()  # one line for the command line and the UI
        assert path.read_bytes() == data  # the bad file itself is left as it was
    path.unlink()
    assert snapshot(folder) == before  # the presets already saved are byte-identical
    assert [p.name for p in presets.list_presets() if p.origin == "user"] == ["kept-one", "kept-two"]


def test_a_utf8_byte_order_mark_is_accepted(tmp_path):
    # Unicode 15.0, section 23.8: U+FEFF at the start of a UTF-8 file is a signature, not content.
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf[string]\nmodes = 33\n")
    assert presets.read_preset_file(path).get("string.modes") == 33


NEWER = """format = 3
name = "from-the-future"
voices = 7
future_mode = "sparkle"

[string]
modes = 48
stiffness_curve = [1, 2, 3]

[chorus]
depth = 0.3

[[pickup]]
position = 0.21
tilt_deg = 4.0
"""


def test_a_preset_from_a_newer_version_loads_with_a_warning_listing_what_was_left_out(tmp_path, saved):
    # Decision (documented in rtvoice/engine/presets.py): a newer preset format loads what this version
    # knows and warns with every key it left out; a player hears the sound nearly as saved instead of
    # nothing. Values of known keys are still checked in full.
    folder, before = saved
    path = tmp_path / "newer.toml"
    path.write_text(NEWER)
    with pytest.warns(presets.PresetWarning) as caught:
        s = presets.read_preset_file(path)
    assert (s.get("voices"), s.get("string.modes"), s.get("pickup.0.position")) == (7, 48, 0.21)
    assert s.name == "from-the-future"
    text = str(caught[0].message)
    for key in ("future_mode", "string.stiffness_curve", "chorus.depth", "pickup.0.tilt_deg", str(path)):
        assert key in text
    bad_value = NEWER.replace("modes = 48", "modes = 9999")
    path.write_text(bad_value)
    with pytest.raises(SettingsError, match="string.modes"):
        presets.read_preset_file(path)
    assert snapshot(folder) == before


def test_saving_over_a_newer_preset_is_refused_so_its_extra_keys_survive(user_home):
    folder = user_home / "presets"
    folder.mkdir()
    (folder / "future.toml").write_text(NEWER)
    with pytest.warns(presets.PresetWarning):
        s = presets.load_preset("future")
    with pytest.raises(PresetError, match="newer rtvoice"):
        presets.save_preset(s, "future")
    assert (folder / "future.toml").read_text() == NEWER
    presets.save_preset(s, "future-copy")  # under another name it saves, in this version's format
    assert tomllib.loads((folder / "future-copy.toml").read_text())["format"] == 2


def test_newer_preset_warning_is_one_line_on_the_command_line(tmp_path, capsys):
    from rtvoice.cli import main

    path = tmp_path / "newer.toml"
    path.write_text(NEWER)
    assert main(["presets", "check", str(path)]) == 0
    out, err = capsys.readouterr()
    assert out.startswith("ok")
    assert err.startswith("rtvoice: warning: ") and len(err.strip().splitlines()) == 1 and "chorus.depth" in err


@pytest.mark.parametrize("name", ["../kept-one", "../../etc/passwd", "a/b", "a\\b", "..", ".", "x/../kept-two",
                                  "kept-one\x00", "/tmp/x", "~/x"])
def test_names_with_path_separators_or_dots_touch_nothing(user_home, saved, name):
    folder, before = saved
    for action in (lambda: presets.save_preset(Settings.defaults(), name),
                   lambda: presets.delete_preset(name),
                   lambda: presets.rename_preset("kept-one", name),
                   lambda: presets.rename_preset(name, "fresh")):
        with pytest.raises(PresetError, match="not allowed"):
            action()
    assert snapshot(folder) == before
    assert sorted(p.name for p in user_home.iterdir()) == ["presets"]


def test_a_stored_name_that_looks_like_a_path_is_only_text(tmp_path, user_home, saved):
    # The name inside a file is display text; the file name comes from the save, checked by check_name.
    folder, before = saved
    path = tmp_path / "odd.toml"
    path.write_text('name = "../../kept-one"\n[string]\nmodes = 21\n')
    s = presets.read_preset_file(path)
    assert s.name == "../../kept-one"
    out = presets.save_preset(s, "odd")
    assert out == folder / "odd.toml"
    assert tomllib.loads(out.read_text())["name"] == "odd"
    after = snapshot(folder)
    assert {k: v for k, v in after.items() if k != "odd.toml"} == before


def test_huge_file_is_refused(tmp_path):
    path = tmp_path / "huge.toml"
    path.write_text("# " + "x" * (presets.MAX_PRESET_BYTES + 10))
    with pytest.raises(PresetError, match="larger"):
        presets.read_preset_file(path)


def test_partial_preset_takes_defaults_for_the_rest(tmp_path):
    path = tmp_path / "p.toml"
    path.write_text("[string]\nt60_low = 3.0\n")
    s = presets.read_preset_file(path)
    assert s.get("string.t60_low") == 3.0
    assert s.get("string.modes") == Settings.defaults().get("string.modes")


def test_written_preset_is_plain_toml_with_the_documented_tables(user_home):
    path = presets.save_preset(Settings.defaults().with_values({"pickup.1.level_db": -3.0}), "tables")
    data = tomllib.loads(path.read_text())
    assert set(data) >= {"tuning", "string", "excitation", "pickup", "electronics", "output", "voices", "name"}
    assert isinstance(data["pickup"], list) and len(data["pickup"]) == 2


def test_read_only_user_folder_gives_a_clear_error(user_home):
    folder = user_home / "presets"
    folder.mkdir()
    presets.save_preset(Settings.defaults(), "keep")
    folder.chmod(0o500)
    try:
        if os.geteuid() == 0:
            pytest.skip("root ignores folder permissions; the read-only case needs an unprivileged user")
        with pytest.raises(PresetError, match="cannot save"):
            presets.save_preset(Settings.defaults().with_values({"voices": 3}), "keep")
        assert presets.load_preset("keep").get("voices") == Settings.defaults().get("voices")
    finally:
        folder.chmod(0o700)


def test_unwritable_user_folder_gives_a_clear_error(tmp_path, monkeypatch):
    # A file where the preset folder should be: the folder cannot be created, even by root.
    blocker = tmp_path / "blocker"
    blocker.write_text("not a folder")
    monkeypatch.setenv("RTVOICE_HOME", str(blocker))
    with pytest.raises(PresetError, match="cannot create the preset folder"):
        presets.save_preset(Settings.defaults(), "x")
    assert blocker.read_text() == "not a folder"


# -- presets are data only ---------------------------------------------------------------------------
CODE_LIKE = [
    "__import__('os').system('touch {marker}')",
    "exec(\"open('{marker}', 'w')\")",
    "eval(compile('open(\\'{marker}\\', \\'w\\')', 'x', 'exec'))",
    "!!python/object/apply:os.system ['touch {marker}']",
    "${{touch {marker}}}",
    "$(touch {marker})",
    "`touch {marker}`",
]


@pytest.mark.parametrize("code", CODE_LIKE)
def test_strings_that_look_like_code_are_plain_data_or_refused_and_nothing_runs(tmp_path, code):
    marker = tmp_path / "ran"
    text = code.format(marker=marker)
    quoted = tomllib.loads("v = " + _toml_string(text))["v"]
    assert quoted == text
    # As text where text is allowed: kept verbatim, nothing evaluated.
    ok = tmp_path / "text.toml"
    ok.write_text(f"name = {_toml_string(text)}\ndescription = {_toml_string(text)}\n")
    s = presets.read_preset_file(ok)
    assert s.name == text and s.description == text
    # Where a number or a choice belongs: refused by type, still nothing evaluated.
    for body in (f"[string]\nmodes = {_toml_string(text)}", f"[excitation]\nkind = {_toml_string(text)}",
                 f"[[control]]\ntarget = {_toml_string(text)}\ncc = 20", f"voices = {_toml_string(text)}"):
        bad = tmp_path / "bad.toml"
        bad.write_text(body)
        with pytest.raises(SettingsError):
            presets.read_preset_file(bad)
    assert not marker.exists()
    # Saved and shown again, the text comes back as text.
    out = presets.save_preset(s, "codeish")
    assert presets.read_preset_file(out).description == text
    assert not marker.exists()


def _toml_string(text: str) -> str:
    """A TOML basic string (TOML 1.0: backslash and quote escaped)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__", "execfile", "input", "breakpoint", "import_module"}
FORBIDDEN_MODULES = {"pickle", "cPickle", "_pickle", "marshal", "shelve", "importlib", "runpy", "code", "codeop",
                     "yaml", "dill", "subprocess", "ctypes"}
SAFE_OWNERS = {"re"}  # re.compile builds a regular expression, it runs nothing


@pytest.mark.parametrize("module", ["presets.py", "settings.py"])
def test_the_preset_reader_source_has_no_way_to_run_data(module):
    # The reading path is tomllib (data only, TOML 1.0) and the schema checks; a scan of the syntax tree
    # makes sure no call or import that can run or unpickle text sneaks in.
    source = (Path(presets.__file__).parent / module).read_text()
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Call):
            func = node.func
            owner = func.value.id if isinstance(func, ast.Attribute) and isinstance(func.value, ast.Name) else ""
            name = func.id if isinstance(func, ast.Name) else func.attr if isinstance(func, ast.Attribute) else ""
            if (name in FORBIDDEN_CALLS and owner not in SAFE_OWNERS) or owner in FORBIDDEN_MODULES:
                found.append(f"call {owner + '.' if owner else ''}{name} at line {node.lineno}")
            if name in {"getattr", "setattr", "globals", "locals", "vars"}:
                found.append(f"dynamic {name} at line {node.lineno}")
        elif isinstance(node, ast.Import | ast.ImportFrom):
            names = [a.name for a in node.names] + ([node.module] if isinstance(node, ast.ImportFrom) else [])
            found += [f"import {n} at line {node.lineno}" for n in names if n and n.split(".")[0] in FORBIDDEN_MODULES]
    assert found == []
    assert "tomllib" in source  # the TOML parser is the standard library's data-only one
