"""Shared pytest fixtures for rtvoice.

Only fixtures live here; helpers for JACK tests are in ``tests/jackutil.py``
(``import jackutil`` from a test module).
"""

import os

# Before numpy loads anywhere in this process: one BLAS thread (as in the engine process),
# and no JACK client (PortAudio, rtmidi, the JACK tools) may start a server on its own.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("JACK_NO_START_SERVER", "1")

import shutil  # noqa: E402
from collections.abc import Iterator  # noqa: E402

import jackutil  # noqa: E402
import pytest  # noqa: E402


@pytest.fixture(scope="session")
def jack_server() -> Iterator[jackutil.JackServerInfo]:
    """The running JACK server (scripts/test starts a dummy-backend one).

    Yields a :class:`jackutil.JackServerInfo` (sample rate, period, ports at start).
    Skips when no server answers ``jack_lsp`` and RTVOICE_JACK is unset; fails when
    RTVOICE_JACK is set (scripts/test promised a server) but none answers.
    """
    required = bool(os.environ.get("RTVOICE_JACK"))
    if shutil.which("jack_lsp") is None:
        reason = "jack_lsp not found (Debian packages jackd2 jack-tools jack-capture)"
    elif not jackutil.server_answers():
        reason = "no JACK server answers jack_lsp"
    else:
        try:
            info = jackutil.server_info(required=required)
        except jackutil.JackError as exc:
            pytest.fail(f"JACK server answers but cannot be queried: {exc}")
        yield info
        return
    if required:
        pytest.fail(f"RTVOICE_JACK is set but {reason}")
    pytest.skip(f"{reason}; run scripts/test, which starts a JACK dummy server")
