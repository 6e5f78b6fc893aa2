"""Small process helpers shared by the benchmark, the survey and the tests (no rtvoice imports)."""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
from collections.abc import Iterator, Mapping


@contextlib.contextmanager
def scoped_environ(values: Mapping[str, str]) -> Iterator[None]:
    """Set environment variables for the ``with`` block, then restore (or unset) each one."""
    saved = {k: os.environ.get(k) for k in values}
    os.environ.update(values)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def stop_process(proc: subprocess.Popen, timeout_s: float = 5.0, sig: int = signal.SIGTERM) -> int | None:
    """Ask a child to stop (``sig``, SIGTERM by default), and kill it if it has not gone within
    ``timeout_s``; returns its exit status."""
    if proc.poll() is None:
        proc.send_signal(sig)
        try:
            proc.wait(timeout_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    return proc.returncode
