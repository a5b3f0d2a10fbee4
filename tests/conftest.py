"""Shared test settings: single-threaded torch keeps timings and results stable on small CPUs."""

import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import pytest  # noqa: E402
import torch  # noqa: E402

torch.set_num_threads(1)

# Loads a path in a process of its own: the refusal message, then the peak resident memory (MB).
_PEAK_RSS_MB = (
    "import resource, sys, loopzoo\n"
    "from loopzoo.serve import ArtifactError\n"
    "try:\n"
    "    loopzoo.load(sys.argv[1])\n"
    "except ArtifactError as error:\n"
    "    print(error)\n"
    "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss // 1024)\n"
)


def _peak_rss_mb(*argv: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-c", *argv], capture_output=True, text=True,
                          timeout=300, check=True)


@pytest.fixture(scope="session")
def fresh_load() -> Callable[[Path], tuple[str, int]]:
    """``fresh_load(path)``: the refusal message of ``loopzoo.load(path)`` in a new process and
    how many MB its peak memory exceeds that of a process that only imports loopzoo."""
    bare = int(_peak_rss_mb("import resource, loopzoo; print(resource.getrusage("
                            "resource.RUSAGE_SELF).ru_maxrss // 1024)").stdout)

    def load(path: Path) -> tuple[str, int]:
        *message, peak = _peak_rss_mb(_PEAK_RSS_MB, str(path)).stdout.strip().splitlines()
        return "\n".join(message), int(peak) - bare

    return load
