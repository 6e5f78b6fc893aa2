"""Real small disks for the tests of full and read-only folders: tmpfs mounts (root only)."""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest


def mount_tmpfs(where: Path, size: str, read_only: bool = False) -> None:
    """Mount a tmpfs of ``size`` (e.g. ``64k``) at ``where`` (made if missing); skips the test where
    mounting is not allowed (not root, or no mount namespace to do it in)."""
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root (run the suite as root, as on the CI machine)")
    where.mkdir(parents=True, exist_ok=True)
    options = f"size={size},mode=0755" + (",ro" if read_only else "")
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {r.stderr.strip() or r.returncode}")


def unmount(where: Path) -> None:
    """Unmount ``where``, lazily if something still holds it."""
    r = subprocess.run(["umount", str(where)], capture_output=True, text=True)
    if r.returncode != 0:
        subprocess.run(["umount", "-l", str(where)], capture_output=True, text=True)
