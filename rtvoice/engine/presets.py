"""Presets: TOML files whose tables mirror the parameter names.

Factory presets live in the repository's ``presets/`` folder and are read-only;
user presets live in the per-user data directory (``RTVOICE_HOME`` overrides it,
for tests and portable set-ups). Loading validates everything and names the
file, key, value and what is allowed; saving is atomic (temporary file, fsync,
rename), so a crash never leaves a half-written preset.
"""

from __future__ import annotations

import os
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

import tomli_w

from rtvoice.engine.settings import Settings, SettingsError

MAX_PRESET_BYTES = 256 * 1024
NAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")
FACTORY_DIR = Path(__file__).resolve().parents[2] / "presets"


class PresetError(ValueError):
    """A preset that cannot be read or written, with the reason in plain words."""


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
            raise PresetError(f"{name_or_path}: no such preset file")
        return PresetInfo(path.stem, "file", path)
    check_name(name_or_path)
    for origin, folder in (("user", user_dir()), ("factory", FACTORY_DIR)):
        path = folder / f"{name_or_path}.toml"
        if path.is_file():
            return PresetInfo(name_or_path, origin, path)
    names = ", ".join(p.name for p in list_presets()) or "none"
    raise PresetError(f"no preset named {name_or_path!r} (available: {names})")


def read_preset_file(path: Path | str) -> Settings:
    """Load and validate one preset file; raises PresetError or SettingsError."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_PRESET_BYTES:
            raise PresetError(f"{path}: {size} bytes is larger than a preset can be ({MAX_PRESET_BYTES})")
        raw = path.read_bytes()
    except OSError as err:
        raise PresetError(f"{path}: cannot read ({err.strerror or err})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise PresetError(f"{path}: not a text file (preset files are UTF-8 TOML)") from None
    if not text.strip():
        raise PresetError(f"{path}: empty file")
    settings = Settings.from_toml_text(text, source=str(path))
    return settings if settings.name else settings.renamed(path.stem)


def load_preset(name_or_path: str) -> Settings:
    return read_preset_file(find_preset(name_or_path).path)


def preset_text(settings: Settings) -> str:
    """The preset as TOML, with every list of tables written as ``[[name]]`` blocks."""
    data = settings.to_nested()
    lists = {k: data.pop(k) for k in list(data) if isinstance(data[k], list) and data[k]
             and all(isinstance(v, dict) for v in data[k])}
    parts = [tomli_w.dumps(data)]
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
    write_atomic(target, data)
    return target


def write_atomic(target: Path, data: bytes) -> None:
    """Replace ``target`` with ``data`` so that a crash leaves the old file or the new one, whole."""
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
    "PresetInfo",
    "SettingsError",
    "check_name",
    "delete_preset",
    "find_preset",
    "list_presets",
    "load_preset",
    "read_preset_file",
    "rename_preset",
    "save_preset",
    "user_dir",
]
