"""The engine process behind an :class:`~rtvoice.host.link.EngineLink`: starting it, replacing it, stopping it.

The engine is spawned (multiprocessing 'spawn', so no Python state of the UI comes along) with
the current sound and controller map, on the shared board the link reads its meters from. A
process whose audio library is stuck on a lost server asks to be replaced: a fresh one is started
while the old one is kept until it ends. Closing asks the engine to fade out first and forces
it only when it does not leave in time.

A mixin for :class:`rtvoice.host.link.EngineLink`, which provides the link's state and its message
pump (declared below).
"""

from __future__ import annotations

import multiprocessing
import os
import time
from collections import deque
from dataclasses import replace
from multiprocessing.connection import Connection
from multiprocessing.process import BaseProcess
from typing import TYPE_CHECKING, Any

from rtvoice.engine import Settings
from rtvoice.host import messages as msgs
from rtvoice.host.board import Board
from rtvoice.host.errors import HostError

START_TIMEOUT_S = 30.0  # spawning imports numpy and scipy: seconds on a slow machine
CLOSE_TIMEOUT_S = 5.0


class LinkProcess:
    """The engine process's life cycle, as the link sees it."""

    # -- provided by EngineLink --------------------------------------------------------------
    config: dict[str, Any]  # the engine's options; the sound and the board are added at each spawn
    _settings: Settings
    _controls: list[dict[str, Any]]
    _messages: deque[msgs.Notice]
    _process: BaseProcess | None
    _conn: Connection | None
    _board: Board | None
    _closed: bool
    _old: list[BaseProcess]  # processes that asked to be replaced, joined when they end
    _respawning: bool
    _restarted: bool
    _spawned: bool

    if TYPE_CHECKING:
        def _take(self, msg: object) -> bool: ...
        def _pump(self, timeout_s: float) -> None: ...
        def _send(self, command: msgs.Command) -> None: ...

    def start(self) -> None:
        """Spawn the engine process and wait until its audio runs; HostError says why not."""
        if self.alive():
            return
        self._messages.clear()
        self._spawn()
        proc, conn = self._process, self._conn
        assert proc is not None and conn is not None  # _spawn set both
        deadline = time.monotonic() + START_TIMEOUT_S
        while time.monotonic() < deadline:
            if conn.poll(0.05):
                try:
                    msg = receive(conn)
                except (EOFError, OSError):
                    break
                if isinstance(msg, msgs.Fatal) and msgs.well_formed(msg):
                    self._reap()
                    raise HostError(msg.text)
                if self._take(msg) and isinstance(msg, msgs.Ready):
                    return
            elif not proc.is_alive():
                break
        code = proc.exitcode
        self._reap()
        if code is None:
            raise HostError(f"the engine process did not start within {START_TIMEOUT_S:.0f} s")
        raise HostError(f"the engine process exited while starting (exit code {code})")

    def _spawn(self) -> None:
        """Start an engine process (not waiting for it) on the current sound and controller map."""
        # Imported when needed: that module sets OPENBLAS_NUM_THREADS as it loads, meant for the engine's process.
        from rtvoice.host.engine_process import engine_main

        ctx = multiprocessing.get_context("spawn")
        parent, child = ctx.Pipe(duplex=True)
        if self._board is None:
            self._board = Board.create()
        settings = self._settings
        if self._controls and settings.controls is None:
            settings = replace(settings, controls=tuple(self._controls))  # a learned map survives a restart
        # A second engine of this link (restarted, or respawned when the audio server came
        # back) appends to the take: what the first one recorded stays.
        config = dict(self.config, settings=settings, board=self._board.name, record_append=self._spawned)
        self._spawned = True
        saved = os.environ.get("OPENBLAS_NUM_THREADS")
        os.environ["OPENBLAS_NUM_THREADS"] = "1"  # inherited by the engine process: BLAS single-threaded
        try:
            proc = ctx.Process(target=engine_main, args=(child, config), name="rtvoice-engine", daemon=True)
            proc.start()
        finally:
            if saved is None:
                os.environ.pop("OPENBLAS_NUM_THREADS", None)
            else:
                os.environ["OPENBLAS_NUM_THREADS"] = saved
        child.close()
        self._process, self._conn, self._closed = proc, parent, False
        self._respawning = False

    def _respawn(self) -> None:
        """The engine asked for a fresh process (its audio library is stuck on a lost server)."""
        old = self._process
        if self._conn is not None:
            self._conn.close()
        if old is not None:
            self._old.append(old)
        self._spawn()
        self._restarted = True

    def alive(self) -> bool:
        return self._process is not None and not self._closed and self._process.is_alive()

    def restart(self) -> None:
        """Stop the engine if it still runs and start a new one with the current sound and controls."""
        self.close()
        self.start()

    def close(self) -> None:
        """Ask the engine to fade out and exit; wait a few seconds, then force it."""
        proc = self._process
        if proc is None:
            return
        if proc.is_alive():
            self._send(msgs.Close())
            deadline = time.monotonic() + CLOSE_TIMEOUT_S
            while proc.is_alive() and time.monotonic() < deadline:
                self._pump(0.05)
        self._pump(0.0)
        self._reap()

    def _reap(self) -> None:
        proc = self._process
        if proc is not None:
            proc.join(0.5)
            if proc.is_alive():
                proc.terminate()
                proc.join(2.0)
            if proc.is_alive():
                proc.kill()
                proc.join(2.0)
        if self._conn is not None:
            self._conn.close()
        if self._board is not None:
            self._board.close()
        self._process, self._conn, self._board = None, None, None
        self._closed = True
        for old in self._old:
            old.join(1.0)
            if old.is_alive():
                old.kill()
        self._old.clear()

    @property
    def exitcode(self) -> int | None:
        return None if self._process is None else self._process.exitcode


def receive(conn: Connection) -> object:
    """One object from the pipe; None when its bytes do not unpickle (counted as malformed by
    :meth:`EngineLink._take`). A closed pipe still raises EOFError or OSError."""
    try:
        return conn.recv()
    except (EOFError, OSError):
        raise
    except Exception:  # noqa: BLE001 - an unpickling error of any kind: a malformed message
        return None
