"""Presets: the factory set, validation messages, atomic saving, safe names."""

import os
import tomllib

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
    s = Settings.defaults().with_values({"pickup.1.position": 0.31, "excitation.shape": [[0.2, 0.5], [0.4, 1.0]]})
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


BAD = [
    ("", "empty file"),
    (b"\x00\xff\xfe garbage", "not a text file"),
    ("[string\nmodes = 3", "not valid TOML"),
    ("[string]\nmodes = 'many'", "string.modes"),
    ("[string]\nmodes = 0", "out of range"),
    ("[string]\ncolour = 3", "unknown parameter"),
    ("volume = 3", "unknown key"),
    ("[string]\nt60_low = nan", "finite"),
    ("[string]\nt60_low = inf", "finite"),
    ("[string]\nt60_low = 1e308", "out of range"),
    ("[string]\nt60_low = 1.0\nt60_high = 2.0", "must not exceed"),
    ("[excitation]\nkind = 'bow'", "expected one of"),
    ("[excitation]\nshape = [[1.5, 0.2]]", "strictly between"),
    ("[excitation]\nshape = 'triangle'", "list of [x, y]"),
    ("[[pickup]]\nposition = 1.2", "pickup.0.position"),
    ("[[pickup]]\nsensing = 'magic'", "expected one of"),
    ("[[pickup]]\npolarity = 2", "expected one of"),
    ("[[pickup]]\nhum = 1", "unknown key"),
    ("pickup = 3", "expected [[pickup]]"),
    ("[[pickup]]\n[[pickup]]\n[[pickup]]\n[[pickup]]\n[[pickup]]", "between 1 and 4"),
    ("voices = 1000", "out of range"),
    ("voices = true", "whole number"),
    ("name = 5", "expected text"),
]


@pytest.mark.parametrize(("content", "needle"), BAD)
def test_bad_preset_files_are_refused_with_a_clear_message(tmp_path, content, needle):
    path = tmp_path / "bad.toml"
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    with pytest.raises((PresetError, SettingsError)) as info:
        presets.read_preset_file(path)
    message = str(info.value)
    assert needle in message
    assert str(path) in message or "bad.toml" in message


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
