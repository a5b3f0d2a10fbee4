"""Real sweeps in their own process group, killed with SIGKILL at a chosen moment (slow tests)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path


def start_sweep(overrides: list[str], out: Path) -> subprocess.Popen:
    """``loopzoo sweep OVERRIDES out=OUT`` in a new session (its own process group), silent."""
    return subprocess.Popen([sys.executable, "-m", "loopzoo.cli", "sweep", *overrides,
                             f"out={out}"], start_new_session=True, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)


def kill_when(process: subprocess.Popen, ready: Callable[[], bool], timeout: float,
              poll: float = 0.05) -> bool:
    """SIGKILL the sweep's whole process group (launcher workers included) once ``ready()``;
    True if it was killed, False if it ended first."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and process.poll() is None and not ready():
        time.sleep(poll)
    alive = process.poll() is None
    if alive:
        os.killpg(process.pid, signal.SIGKILL)
    process.wait()
    return alive
