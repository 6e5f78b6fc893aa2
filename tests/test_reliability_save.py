"""Saving presets under faults: kill -9 at random moments, a full disk, a read-only folder.

What must hold comes from how the save is built (rtvoice/engine/presets.py): the
new bytes go to a temporary file that is fsynced and then renamed over the old
name. POSIX.1-2017, rename(): "If the link named by the new argument exists, it
shall be removed and old renamed to new. ... a link named new shall remain
visible to other threads throughout the renaming operation and refer either to
the file referred to by new or old before the operation began." So after any
kill, the name holds the old bytes or the new bytes, whole.

The kills and the disks are real: real processes killed with SIGKILL, a real
tmpfs filled to its last byte, a real read-only mount (root only; the tests skip
with the reason otherwise).
"""

from __future__ import annotations

import errno
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from support.mounts import mount_tmpfs, unmount

from rtvoice.engine import presets
from rtvoice.engine.presets import PresetError
from rtvoice.engine.settings import Settings

TESTS = Path(__file__).resolve().parent
KILLS = 240
FRESH_EVERY = 5  # every 5th round saves under a name never saved before: the "first save" case


def sound_a() -> Settings:
    """A large-ish preset (64-point pluck shape, four pickups, a long description): ~7 KB of TOML."""
    shape = [[round(0.01 + 0.0152 * i, 4), round(0.3 + 0.6 * ((i * 37) % 11) / 11, 4)] for i in range(64)]
    # The fourth pickup is placed by hand at 0.2 of the scale (130 mm), within the default neck (the 22nd
    # fret lies 181.8 mm from the saddle, 12-TET fret rule, common practice): the place an added fourth
    # pickup gets, 0.33 (214 mm), lies over that neck, and this test is about saving, not placing.
    s = Settings.defaults().with_pickup_count(4).with_values({"excitation.shape": shape, "voices": 12,
                                                               "pickup.3.position": 0.2})
    return s.renamed("a", "first version " + "a" * 1900)


def sound_b() -> Settings:
    shape = [[round(0.02 + 0.015 * i, 4), round(0.9 - 0.5 * ((i * 13) % 7) / 7, 4)] for i in range(64)]
    s = Settings.defaults().with_pickup_count(3).with_values({"excitation.shape": shape, "voices": 20,
                                                               "string.modes": 77})
    return s.renamed("b", "second version " + "b" * 1900)


def saved_bytes(sound: Settings, name: str) -> bytes:
    return presets.preset_text(sound.renamed(name)).encode("utf-8")


# A process that imports rtvoice once, then forks one saver per round on request, so that each of the
# hundreds of kills costs a fork, not an interpreter start. The savers are its children; it reaps them.
ZYGOTE = r"""
import os, sys
sys.path.insert(0, sys.argv[1])
from rtvoice.engine import presets
from test_reliability_save import sound_a, sound_b
sounds = [sound_a(), sound_b()]
print("ready", flush=True)
for line in sys.stdin:
    cmd, arg = line.split()
    if cmd == "go":
        pid = os.fork()
        if pid == 0:
            try:
                i = 0
                while True:
                    presets.save_preset(sounds[i % 2], arg)
                    i += 1
            finally:
                os._exit(1)
        print(pid, flush=True)
    elif cmd == "reap":
        _, status = os.waitpid(int(arg), 0)
        print(status, flush=True)
"""


def temp_files(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".tmp"))


def test_kill_9_during_saves_leaves_old_or_new_whole(tmp_path, monkeypatch):
    home = tmp_path / "home"
    folder = home / "presets"
    monkeypatch.setenv("RTVOICE_HOME", str(home))
    presets.save_preset(sound_a().renamed("x", "an untouched bystander"), "bystander")
    bystander = (folder / "bystander.toml").read_bytes()
    presets.save_preset(sound_b(), "stage")  # "stage" exists from the start: it must never vanish
    versions = {"a": sound_a(), "b": sound_b()}
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    zygote = subprocess.Popen([sys.executable, "-c", ZYGOTE, str(TESTS)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True, env=env, bufsize=1)
    rng = random.Random(7)
    stats = {"kills": 0, "absent_first": 0, "left_temp": 0, "max_temp": 0, "a": 0, "b": 0}
    try:
        assert zygote.stdout.readline().strip() == "ready"
        for round_ in range(KILLS):
            name = f"fresh-{round_}" if round_ % FRESH_EVERY == 0 else "stage"
            zygote.stdin.write(f"go {name}\n")
            pid = int(zygote.stdout.readline())
            time.sleep(rng.uniform(0.0, 0.012))  # 0-12 ms: before, inside and between ~3 ms saves
            os.kill(pid, signal.SIGKILL)
            zygote.stdin.write(f"reap {pid}\n")
            status = int(zygote.stdout.readline())
            assert os.WIFSIGNALED(status) and os.WTERMSIG(status) == signal.SIGKILL
            stats["kills"] += 1
            check_after_kill(folder, name, versions, bystander, stats, fresh=name != "stage")
    finally:
        zygote.stdin.close()
        zygote.wait(timeout=10)
    # Leftovers are removed by the next save, which holds the folder lock.
    presets.save_preset(sound_b(), "stage")
    assert temp_files(folder) == []
    assert (folder / "bystander.toml").read_bytes() == bystander
    print(f"kill -9 during preset saves: {stats}")
    assert stats["kills"] >= 200
    # The kills must have landed inside saves (temporary file written, not yet renamed) as well as
    # between them, or the test would not have tried the dangerous moment.
    assert stats["left_temp"] >= 10, stats
    assert stats["a"] > 0 and stats["b"] > 0 and stats["absent_first"] > 0, stats


def check_after_kill(folder: Path, name: str, versions: dict, bystander: bytes, stats: dict, fresh: bool) -> None:
    target = folder / f"{name}.toml"
    leftovers = temp_files(folder)
    # Each save first removes older leftovers under the lock, so a kill leaves at most its own one.
    assert len(leftovers) <= 1, leftovers
    stats["left_temp"] += len(leftovers)
    stats["max_temp"] = max(stats["max_temp"], len(leftovers))
    if not target.exists():
        assert fresh, "a preset that had been saved before vanished"
        stats["absent_first"] += 1
    else:
        data = target.read_bytes()
        which = [k for k, sound in versions.items() if data == saved_bytes(sound, name)]
        assert which, f"{target} is neither version ({len(data)} bytes)"
        stats[which[0]] += 1
        assert presets.load_preset(name).differences(versions[which[0]]) == []
    assert (folder / "bystander.toml").read_bytes() == bystander
    names = {p.name for p in presets.list_presets() if p.origin == "user"}
    assert "bystander" in names and all(not n.startswith(".") for n in names)
    assert (name in names) == target.exists()
    if fresh and target.exists():
        target.unlink()  # keep the folder small; the next fresh round starts from no file again


# -- a real full disk and a real read-only folder (tmpfs mounts; root only) ---------------------------



@pytest.fixture()
def tiny_home(tmp_path, monkeypatch):
    home = tmp_path / "tiny"
    mount_tmpfs(home, "64k")
    monkeypatch.setenv("RTVOICE_HOME", str(home))
    yield home
    unmount(home)


def fill(path: Path) -> int:
    """Write zeros to ``path`` until the file system is full; returns the bytes written."""
    written = 0
    with open(path, "wb", buffering=0) as fh:
        for size in (65536, 4096, 512, 1):
            while True:
                try:
                    written += fh.write(b"\0" * size)
                except OSError as err:
                    assert err.errno == errno.ENOSPC
                    break
    return written


def test_disk_full_gives_a_clear_message_and_keeps_the_old_preset(tiny_home):
    folder = tiny_home / "presets"
    presets.save_preset(sound_a(), "keep")
    old = (folder / "keep.toml").read_bytes()
    filler = tiny_home / "filler"
    assert fill(filler) > 0
    for name in ("keep", "brand-new"):
        with pytest.raises(PresetError) as info:
            presets.save_preset(sound_b(), name)
        message = str(info.value)
        assert "No space left on device" in message and "unchanged" in message and "\n" not in message
    assert (folder / "keep.toml").read_bytes() == old
    assert not (folder / "brand-new.toml").exists()
    assert temp_files(folder) == []  # the failed saves removed their partial temporary files
    assert presets.load_preset("keep").differences(sound_a()) == []
    filler.unlink()  # space again: the next save works (recovered)
    presets.save_preset(sound_b(), "keep")
    assert presets.load_preset("keep").differences(sound_b()) == []


def test_full_disk_through_the_command_line_is_one_line(tiny_home, capsys):
    # `rtvoice render` writes a WAV: on a full disk it says so in one line and leaves no partial file.
    from rtvoice.cli import main

    fill(tiny_home / "filler")
    out = tiny_home / "x.wav"
    code = main(["render", "--note", "60", "--seconds", "0.5", "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and "No space left on device" in err and len(err.strip().splitlines()) == 1, err
    assert sorted(p.name for p in tiny_home.iterdir()) == ["filler"]


def test_leftover_temporary_files_from_killed_saves_are_cleaned_even_on_a_full_disk(tiny_home):
    # A killed save's leftover takes space; the next save removes it first, so it can succeed.
    folder = tiny_home / "presets"
    presets.save_preset(sound_a(), "keep")
    leftover = folder / ".keep.toml.deadbeef.tmp"
    leftover.write_bytes(saved_bytes(sound_b(), "keep"))
    fill(tiny_home / "filler")
    presets.save_preset(sound_b(), "keep")
    assert temp_files(folder) == []
    assert presets.load_preset("keep").differences(sound_b()) == []


@pytest.fixture()
def read_only_home(tmp_path, monkeypatch):
    home = tmp_path / "ro"
    mount_tmpfs(home, "1m")
    monkeypatch.setenv("RTVOICE_HOME", str(home))
    presets.save_preset(sound_a(), "keep")
    r = subprocess.run(["mount", "-o", "remount,ro", str(home)], capture_output=True, text=True)
    if r.returncode != 0:
        unmount(home)
        pytest.skip(f"cannot remount read-only: {r.stderr.strip()}")
    yield home
    subprocess.run(["mount", "-o", "remount,rw", str(home)], capture_output=True)
    unmount(home)


def test_read_only_folder_gives_a_clear_message_and_loses_nothing(read_only_home):
    folder = read_only_home / "presets"
    old = (folder / "keep.toml").read_bytes()
    for action, words in ((lambda: presets.save_preset(sound_b(), "keep"), "Read-only file system"),
                          (lambda: presets.save_preset(sound_b(), "other"), "Read-only file system"),
                          (lambda: presets.delete_preset("keep"), "Read-only file system"),
                          (lambda: presets.rename_preset("keep", "moved"), "Read-only file system")):
        with pytest.raises(PresetError) as info:
            action()
        assert words in str(info.value) and "\n" not in str(info.value)
    assert (folder / "keep.toml").read_bytes() == old
    assert presets.load_preset("keep").differences(sound_a()) == []
    assert sorted(p.name for p in folder.iterdir()) == ["keep.toml"]
