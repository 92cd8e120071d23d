"""The JACK dummy server that .ci/run starts: detection, and skip-or-fail when it is absent.

.ci/run starts ``jackd -d dummy -r 48000 -p 1024`` before pytest and sets
MEASURE_REQUIRE_AUDIO_SERVER=1, so in CI a missing server FAILS the tests that need it. On a
developer's own machine without it, those tests are skipped with the reason.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import pytest

#: The server's settings, as .ci/run starts it (keep the two in step).
SERVER_FS = 48000
SERVER_PERIOD = 1024
LOOPBACK_DEVICE = "loopback"

START_HINT = (
    "start it with `JACK_NO_AUDIO_RESERVATION=1 jackd --no-realtime -L 2 -d dummy -r 48000 "
    "-p 1024 &` (Debian/Ubuntu: apt-get install jackd2 libportaudio2), as .ci/run does")


def server_running() -> bool:
    """True when jackd runs and its loopback client is there (checked with jack_lsp)."""
    exe = shutil.which("jack_lsp")
    if exe is None:
        return False
    try:
        out = subprocess.run([exe], capture_output=True, text=True, timeout=10,
                             env=dict(os.environ, JACK_NO_START_SERVER="1"))
    except (OSError, subprocess.TimeoutExpired):
        return False
    return f"{LOOPBACK_DEVICE}:capture_1" in out.stdout


def require_audio_server() -> None:
    """Skip (or, with MEASURE_REQUIRE_AUDIO_SERVER=1 as in CI, fail) without the server."""
    if server_running():
        return
    message = f"the JACK dummy audio server is not running; {START_HINT}"
    if os.environ.get("MEASURE_REQUIRE_AUDIO_SERVER") == "1":
        pytest.fail(message + " (MEASURE_REQUIRE_AUDIO_SERVER=1: CI must have it)")
    pytest.skip(message)


#: The loopback client is one shared bus: whatever any client plays on its outputs, every client
#: recording its inputs hears. Tests that use it hold this lock, so that two test runs at once
#: (two terminals, a developer and a helper) never record each other's sweeps.
LOCK_PATH = Path(tempfile.gettempdir()) / "measure-jack-loopback.lock"
LOCK_TIMEOUT_S = 300.0


@contextlib.contextmanager
def exclusive_loopback():
    try:
        import fcntl
    except ImportError:  # no flock (Windows): JACK tests run alone there anyway
        yield
        return
    with open(LOCK_PATH, "a+") as fh:
        deadline = time.monotonic() + LOCK_TIMEOUT_S
        while True:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() > deadline:
                    pytest.fail(f"another test run held {LOCK_PATH} for {LOCK_TIMEOUT_S:g} s")
                time.sleep(0.05)
        try:
            yield
        finally:
            fcntl.flock(fh.fileno(), fcntl.LOCK_UN)


@pytest.fixture
def audio_server():
    """The JACK server is up (or skip/fail), and this test has the loopback bus to itself."""
    require_audio_server()
    with exclusive_loopback():
        yield
