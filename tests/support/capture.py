"""Recording JACK ports to a WAV file with ``jack_capture``, the way an outside listener would.

Typical use::

    from support.capture import Recording

    with Recording(ports, duration_s=1.0, wav_path=tmp_path / "out.wav") as rec:
        ...  # play notes while jack_capture records
    samples, rate_hz = rec.read()  # samples: shape (frames, channels), the order of rtvoice's read_wav
"""

from __future__ import annotations

import os
import subprocess
import time
import warnings
from collections.abc import Sequence
from pathlib import Path
from types import TracebackType

import numpy as np

from .jack_server import JACK_ENV, JackError, connections, list_ports


class Recording:
    """Record JACK ports to a float WAV with ``jack_capture`` for a fixed duration.

    Entering starts ``jack_capture`` and returns only once every source port is connected to it,
    i.e. once sound from the sources reaches the file. Leaving waits for the recording to end
    (``duration_s`` after the start) and checks that the file was written. Channel ``i`` of the
    WAV holds ``ports[i]``.

    The invocation is::

        jack_capture -d DURATION_S -f wav -c N -dc -ns -p PORT1 ... -p PORTN WAV_PATH

    (32-bit float samples are jack_capture's default.)

    Port names are passed exactly (no patterns): resolve patterns first with
    :func:`support.jack_server.wait_for_ports` or :func:`support.jack_server.list_ports`.
    jack_capture only warns about a port it cannot find, so the connections are checked here and
    a missing one raises JackError.
    """

    def __init__(
        self,
        ports: Sequence[str],
        duration_s: float,
        wav_path: str | os.PathLike[str],
        *,
        connect_timeout_s: float = 5.0,
    ) -> None:
        """Prepare a recording of ``ports`` (exact names) for ``duration_s`` s into ``wav_path``."""
        if not ports:
            raise ValueError("Recording needs at least one port")
        if duration_s <= 0:
            raise ValueError(f"duration_s must be positive, got {duration_s}")
        self.ports = list(ports)
        self.duration_s = float(duration_s)
        self.wav_path = Path(wav_path)
        self.connect_timeout_s = connect_timeout_s
        self.process: subprocess.Popen[str] | None = None
        self.output = ""

    @property
    def command(self) -> list[str]:
        """The jack_capture command line this recording runs."""
        cmd = ["jack_capture", "-d", f"{self.duration_s:g}", "-f", "wav"]
        cmd += ["-c", str(len(self.ports)), "-dc", "-ns"]
        for port in self.ports:
            cmd += ["-p", port]
        return [*cmd, str(self.wav_path)]

    def start(self) -> Recording:
        """Start jack_capture and wait until every source port is connected to it."""
        missing = set(self.ports) - set(list_ports())
        if missing:
            raise JackError(f"cannot record unknown ports {sorted(missing)}")
        self.wav_path.parent.mkdir(parents=True, exist_ok=True)
        self.wav_path.unlink(missing_ok=True)
        self.process = subprocess.Popen(
            self.command,
            env=JACK_ENV,
            stdin=subprocess.DEVNULL,
            stdout=subprocess.PIPE,
            stderr=subprocess.STDOUT,
            text=True,
        )
        deadline = time.monotonic() + self.connect_timeout_s
        while not self._all_connected():
            if self.process.poll() is not None or time.monotonic() >= deadline:
                self._kill()
                raise JackError(
                    f"jack_capture did not connect to {self.ports} within "
                    f"{self.connect_timeout_s} s: {self.output.strip()[-500:]}"
                )
            time.sleep(0.02)
        return self

    def _all_connected(self) -> bool:
        table = connections()
        return all(
            any(peer.startswith("jack_capture") for peer in table.get(port, []))
            for port in self.ports
        )

    def _kill(self) -> None:
        if self.process is None:
            return
        if self.process.poll() is None:
            self.process.kill()
        self.output, _ = self.process.communicate()

    def wait(self) -> Path:
        """Wait until the recording has ended; return the WAV path, raise JackError on failure."""
        if self.process is None:
            raise JackError("Recording.wait() before start()")
        try:
            self.output, _ = self.process.communicate(timeout=self.duration_s + 15.0)
        except subprocess.TimeoutExpired:
            self._kill()
            raise JackError(f"jack_capture did not finish: {self.output.strip()[-500:]}") from None
        if self.process.returncode != 0:
            raise JackError(
                f"jack_capture exited with {self.process.returncode}: {self.output.strip()[-500:]}"
            )
        if not self.wav_path.is_file() or self.wav_path.stat().st_size <= 44:
            raise JackError(f"jack_capture wrote no audio to {self.wav_path}")
        return self.wav_path

    def read(self) -> tuple[np.ndarray, int]:
        """Return (samples of shape (frames, len(ports)), sample rate in Hz), the order of
        :func:`rtvoice.offline.wav.read_wav`, which reads the file.

        jack_capture writes 32-bit float WAV with an extra chunk scipy does not know; its warning
        about that chunk is silenced here. A one-port recording still has a channel axis.
        """
        from scipy.io import wavfile

        from rtvoice.offline.wav import read_wav

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", wavfile.WavFileWarning)
            samples, rate_hz = read_wav(self.wav_path)
        return samples.reshape(samples.shape[0], -1), rate_hz

    def __enter__(self) -> Recording:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is not None:
            self._kill()  # the test already failed; do not wait for the full duration
            return
        self.wait()


def record(
    ports: Sequence[str], duration_s: float, wav_path: str | os.PathLike[str]
) -> tuple[np.ndarray, int]:
    """Record ``ports`` for ``duration_s`` seconds; block; return (samples, rate in Hz) as
    :meth:`Recording.read` does.

    The sources must keep playing for the whole duration; see :class:`Recording` to act while
    the recording runs.
    """
    with Recording(ports, duration_s, wav_path) as rec:
        pass
    return rec.read()
