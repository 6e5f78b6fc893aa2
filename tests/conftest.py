"""Shared pytest fixtures for rtvoice.

Only fixtures live here; the helpers are in the ``tests/support`` package, one module per
concern (``from support.jack_server import ...`` from a test module: tests/ is on sys.path).

The UI test modules share two fixtures: ``link``, one engine link per module, and ``home``, a
user folder per test. A UI module asks for ``home`` for every one of its tests with
``pytestmark = pytest.mark.usefixtures("home")``; it is not autouse here, where it would apply to
every test of the suite.
"""

import os

# Before numpy loads anywhere in this process: one BLAS thread (as in the engine process),
# and no JACK client (PortAudio, rtmidi, the JACK tools) may start a server on its own.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("JACK_NO_START_SERVER", "1")

import shutil  # noqa: E402
from collections.abc import Iterator  # noqa: E402
from pathlib import Path  # noqa: E402

import pytest  # noqa: E402
from support.jack_server import JackError, JackServerInfo, server_answers, server_info  # noqa: E402


@pytest.fixture(scope="session")
def jack_server() -> Iterator[JackServerInfo]:
    """The running JACK server (scripts/test starts a dummy-backend one).

    Yields a :class:`support.jack_server.JackServerInfo` (sample rate, period, ports at start).
    Skips when no server answers ``jack_lsp`` and RTVOICE_JACK is unset; fails when
    RTVOICE_JACK is set (scripts/test promised a server) but none answers.
    """
    required = bool(os.environ.get("RTVOICE_JACK"))
    if shutil.which("jack_lsp") is None:
        reason = "jack_lsp not found (Debian packages jackd2 jack-tools jack-capture)"
    elif not server_answers():
        reason = "no JACK server answers jack_lsp"
    else:
        try:
            info = server_info(required=required)
        except JackError as exc:
            pytest.fail(f"JACK server answers but cannot be queried: {exc}")
        yield info
        return
    if required:
        pytest.fail(f"RTVOICE_JACK is set but {reason}")
    pytest.skip(f"{reason}; run scripts/test, which starts a JACK dummy server")


@pytest.fixture(scope="module")
def link():
    """One engine link (``rtvoice.host.link.EngineLink`` on the silent clock) for a whole UI
    test module; each test puts it back with ``support.ui.fresh``."""
    from support.ui import start_link  # local: only the UI tests load the engine link

    lk = start_link()
    yield lk
    lk.close()


@pytest.fixture
def home(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """The test's own user data folder (RTVOICE_HOME): presets and the remembered listening note."""
    from support.ui import user_home

    return user_home(tmp_path, monkeypatch)
