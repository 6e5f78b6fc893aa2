"""Presets: TOML files whose tables mirror the parameter names.

Factory presets live in the repository's ``presets/`` folder and are read-only;
user presets live in the per-user data directory (``RTVOICE_HOME`` overrides it,
for tests and portable set-ups). Loading validates everything and names the
file, key, value and what is allowed; saving is atomic (temporary file, fsync,
rename, fsync of the folder), so a crash never leaves a half-written preset.

Presets are data only: the file is parsed as TOML and every value is checked
against the schema; nothing in it is evaluated, imported or executed. Positions,
slants, widths and the scale length may be written as lengths with a unit
(``position = "40mm"``, ``scale_length_mm = "25.5in"``): the settings convert them
with the scale length the whole file leaves. A save (``format = 2``) writes every
position, slant and width in millimetres (``position = "129.6mm"``), the shortest
decimal that reads back to the same value; a bare number there is a fraction of the
open scale length. A preset from before (``format`` 1 or none) that holds bare
fractions loads as it always did, with a one-line :class:`PresetFormatNotice` saying
they will be saved in mm.

Temporary files are named ``.NAME.toml.XXXX.tmp``: listing skips them (hidden,
not ``*.toml``). A save killed between creating and renaming its temporary file
leaves it behind; the next save into the folder deletes every such leftover
while it holds the folder's lock (``flock`` on the folder), so it never removes
a temporary file that another save is still writing.

A preset from a newer rtvoice (``format`` above ours) loads with a
:class:`PresetWarning` naming the keys this version skipped: a player would
rather hear the sound close to what was saved than not at all, and the warning
says what is missing. Without that marker unknown keys are refused, because
there they are most likely typing mistakes.
"""

from __future__ import annotations

import contextlib
import os
import re
import tempfile
import tomllib
import warnings
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import tomli_w

from rtvoice.engine.distances import FRACTION_FIELDS, SCALE_KEY, mm_text
from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS
from rtvoice.engine.settings import PRESET_FORMAT, Settings, SettingsError
from rtvoice.errors import UserError

try:
    import fcntl
except ImportError:  # not POSIX: saves are still atomic, leftovers are kept
    fcntl = None  # type: ignore[assignment]

MAX_PRESET_BYTES = 256 * 1024
NAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")
FACTORY_DIR = Path(__file__).resolve().parents[2] / "presets"


class PresetError(UserError, ValueError):
    """A preset that cannot be read or written, with the reason in plain words (``source``: the file)."""


class PresetWarning(UserWarning):
    """A preset loaded with something left out (keys from a newer rtvoice); the message lists them."""


class PresetFormatNotice(UserWarning):
    """A preset from before positions were written in mm: loaded as before; it will be saved in mm."""


TEMP_PATTERN = re.compile(r"^\.[A-Za-z0-9][A-Za-z0-9_-]{0,63}\.toml\..+\.tmp$")


@dataclass(frozen=True)
class PresetInfo:
    name: str
    origin: str  # "factory" or "user"
    path: Path


def user_dir() -> Path:
    """Folder for user presets (created on first save)."""
    home = os.environ.get("RTVOICE_HOME")
    if home:
        return Path(home) / "presets"
    import platformdirs

    return Path(platformdirs.user_data_dir("rtvoice", appauthor=False)) / "presets"


def check_name(name: str) -> str:
    """Return ``name`` if it is a safe preset name, else raise PresetError."""
    if not isinstance(name, str) or not NAME_PATTERN.match(name):
        raise PresetError(
            f"preset name {name!r} is not allowed: use 1-64 letters, digits, '-' or '_', "
            "starting with a letter or digit"
        )
    return name


def list_presets() -> list[PresetInfo]:
    """Factory presets, then user presets, each sorted by name."""
    found = []
    for origin, folder in (("factory", FACTORY_DIR), ("user", user_dir())):
        if folder.is_dir():
            for path in sorted(folder.glob("*.toml")):
                if NAME_PATTERN.match(path.stem):
                    found.append(PresetInfo(path.stem, origin, path))
    return found


def find_preset(name_or_path: str) -> PresetInfo:
    """Resolve a preset name (user first, then factory) or a path to a .toml file."""
    if os.sep in name_or_path or "/" in name_or_path or name_or_path.endswith(".toml"):
        path = Path(name_or_path)
        if not path.is_file():
            raise PresetError("no such preset file", source=name_or_path)
        return PresetInfo(path.stem, "file", path)
    check_name(name_or_path)
    for origin, folder in (("user", user_dir()), ("factory", FACTORY_DIR)):
        path = folder / f"{name_or_path}.toml"
        if path.is_file():
            return PresetInfo(name_or_path, origin, path)
    names = ", ".join(p.name for p in list_presets()) or "none"
    raise PresetError(f"no preset named {name_or_path!r} (available: {names})")


def read_preset_file(path: Path | str) -> Settings:
    """Load and validate one preset file; raises PresetError or SettingsError.

    A preset from a newer rtvoice loads with a :class:`PresetWarning` listing the keys left out.
    """
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_PRESET_BYTES:
            raise PresetError(f"{size} bytes is larger than a preset can be ({MAX_PRESET_BYTES})", source=str(path))
        with open(path, "rb") as fh:
            raw = fh.read(MAX_PRESET_BYTES + 1)  # the file may grow between stat and read
    except OSError as err:
        raise PresetError(f"cannot read ({err.strerror or err})", source=str(path)) from None
    return preset_from_bytes(raw, str(path), default_name=path.stem)


def preset_from_bytes(raw: bytes, source: str, default_name: str = "") -> Settings:
    """Validate the bytes of a preset file (named ``source`` in messages); see :func:`read_preset_file`."""
    if len(raw) > MAX_PRESET_BYTES:
        raise PresetError(f"larger than a preset can be ({MAX_PRESET_BYTES} bytes)", source=source)
    try:
        text = raw.decode("utf-8-sig")  # some editors start UTF-8 files with a byte-order mark
    except UnicodeDecodeError:
        raise PresetError("not a text file (preset files are UTF-8 TOML)", source=source) from None
    if not text.strip():
        raise PresetError("empty file", source=source)
    ignored: list[str] = []
    old_fractions: list[str] = []
    settings = Settings.from_toml_text(text, source=source, ignored=ignored, old_fractions=old_fractions)
    if old_fractions:
        warnings.warn(PresetFormatNotice(
            f"{source}: written before positions were in mm; its fractions are read as fractions of the "
            f"{settings.get(SCALE_KEY):g} mm scale length and will be saved in mm"
            + ("; every note plays as an open string of its own (instrument.assign = open), as before"
               if settings.get("instrument.assign") == "open" else "")), stacklevel=2)
    if ignored:
        shown = ", ".join(ignored[:12]) + (f" and {len(ignored) - 12} more" if len(ignored) > 12 else "")
        warnings.warn(PresetWarning(f"{source}: written by a newer rtvoice; left out what this version does "
                                    f"not know: {shown}"), stacklevel=2)
    return settings if settings.name or not default_name else settings.renamed(default_name)


def load_preset(name_or_path: str) -> Settings:
    return read_preset_file(find_preset(name_or_path).path)


def preset_text(settings: Settings) -> str:
    """The preset as TOML, with every list of tables written as ``[[name]]`` blocks.

    Positions, slants and widths are written in millimetres (see
    :func:`rtvoice.engine.distances.mm_text`), so the file reads as a builder measures.
    """
    data = settings.to_nested()
    scale_mm = settings.get(SCALE_KEY)
    tables = [(data["excitation"], {f: PARAMS[f"excitation.{f}"] for f in FRACTION_FIELDS
                                    if f"excitation.{f}" in PARAMS})]
    tables += [(pickup, {f: PICKUP_FIELDS[f] for f in FRACTION_FIELDS}) for pickup in data["pickup"]]
    for table, params in tables:
        for f, param in params.items():
            table[f] = mm_text(table[f], param, scale_mm)
    lists = {k: data.pop(k) for k in list(data) if isinstance(data[k], list) and data[k]
             and all(isinstance(v, dict) for v in data[k])}
    parts = [f"format = {PRESET_FORMAT}\n", tomli_w.dumps(data)]
    for key, items in lists.items():
        parts += [f"\n[[{key}]]\n" + tomli_w.dumps(item) for item in items]
    return "".join(parts)


def save_preset(settings: Settings, name: str) -> Path:
    """Write ``settings`` as user preset ``name`` atomically; returns the path.

    Refuses factory names (save under another name instead) and unsafe names.
    """
    check_name(name)
    if (FACTORY_DIR / f"{name}.toml").is_file():
        raise PresetError(f"{name!r} is a factory preset and cannot be overwritten: save it under another name")
    folder = user_dir()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise PresetError(f"cannot create the preset folder {folder}: {err.strerror or err}") from None
    target = folder / f"{name}.toml"
    data = preset_text(settings.renamed(name)).encode("utf-8")
    with _folder_lock(folder):
        newer = _newer_format(target)
        if newer:
            raise PresetError(f"{target} was written by a newer rtvoice (preset format {newer}); saving over it "
                              "would drop what this version cannot keep: save under another name")
        remove_leftovers(folder)
        write_atomic(target, data)
    return target


def _newer_format(path: Path) -> int:
    """The ``format`` of an existing preset file when it is newer than ours, else 0."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.loads(fh.read(MAX_PRESET_BYTES + 1).decode("utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return 0  # missing or unreadable: nothing this version could keep anyway
    value = data.get("format")
    if isinstance(value, int) and not isinstance(value, bool) and value > PRESET_FORMAT:
        return value
    return 0


@contextlib.contextmanager
def _folder_lock(folder: Path) -> Iterator[None]:
    """Hold an exclusive ``flock`` on the folder (released by the kernel if the process dies)."""
    if fcntl is None:
        yield
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError as err:
        raise PresetError(f"cannot open the preset folder {folder}: {err.strerror or err}") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)  # closing drops the lock


def remove_leftovers(folder: Path) -> list[str]:
    """Delete temporary files of saves that died before renaming; only call under the folder lock."""
    removed: list[str] = []
    if fcntl is None:
        return removed
    try:
        names = os.listdir(folder)
    except OSError:
        return removed
    for entry in names:
        if TEMP_PATTERN.match(entry):
            try:
                os.unlink(folder / entry)
                removed.append(entry)
            except OSError:
                pass  # e.g. a read-only folder: the save itself will say so
    return removed


def write_atomic(target: Path, data: bytes) -> None:
    """Replace ``target`` with ``data`` so that a crash leaves the old file or the new one, whole.

    The data is fsynced before the rename and the folder after it, so after a power
    cut the name points at the old bytes or the new ones, never at an empty file.
    """
    fd = -1
    tmp = ""
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
        os.close(fd)
        fd = -1
        os.replace(tmp, target)
        tmp = ""
        dir_fd = os.open(target.parent, os.O_RDONLY)
        try:
            os.fsync(dir_fd)
        finally:
            os.close(dir_fd)
    except OSError as err:
        raise PresetError(f"cannot save {target}: {err.strerror or err}; the previous file is unchanged") from None
    finally:
        if fd >= 0:
            os.close(fd)
        if tmp:
            try:
                os.unlink(tmp)
            except OSError:
                pass


def delete_preset(name: str) -> None:
    check_name(name)
    path = user_dir() / f"{name}.toml"
    if (FACTORY_DIR / f"{name}.toml").is_file() and not path.is_file():
        raise PresetError(f"{name!r} is a factory preset and cannot be deleted")
    try:
        path.unlink()
    except FileNotFoundError:
        raise PresetError(f"no user preset named {name!r}") from None
    except OSError as err:
        raise PresetError(f"cannot delete {path}: {err.strerror or err}") from None


def rename_preset(old: str, new: str) -> Path:
    """Rename a user preset (its stored name follows); refuses to overwrite."""
    check_name(old)
    check_name(new)
    src = user_dir() / f"{old}.toml"
    if not src.is_file():
        raise PresetError(f"no user preset named {old!r}")
    if (user_dir() / f"{new}.toml").exists() or (FACTORY_DIR / f"{new}.toml").exists():
        raise PresetError(f"a preset named {new!r} exists already")
    path = save_preset(read_preset_file(src), new)
    src.unlink()
    return path


__all__ = [
    "PresetError",
    "PresetFormatNotice",
    "PresetInfo",
    "PresetWarning",
    "SettingsError",
    "check_name",
    "delete_preset",
    "find_preset",
    "list_presets",
    "load_preset",
    "preset_from_bytes",
    "read_preset_file",
    "rename_preset",
    "save_preset",
    "user_dir",
]
