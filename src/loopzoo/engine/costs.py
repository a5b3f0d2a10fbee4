"""Cost figures of a run: per-step inference latency and the peak resident memory of training.

Peak memory is the process's resident-set high-water mark (Linux ``VmHWM``), reset at the start of
the measured phase by writing ``5`` to ``/proc/self/clear_refs``, so each run of a sweep process
gets its own peak rather than the process's lifetime maximum. Where that is unavailable it falls
back to ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` (lifetime peak) and says so.
"""

from __future__ import annotations

import resource
import statistics
import sys
import time
from pathlib import Path

import torch

__all__ = ["PeakMemory", "step_latency_ms"]

_STATUS = Path("/proc/self/status")
_CLEAR_REFS = Path("/proc/self/clear_refs")


def _status_kib(field: str) -> float | None:
    try:
        for line in _STATUS.read_text().splitlines():
            if line.startswith(field + ":"):
                return float(line.split()[1])
    except OSError:
        return None
    return None


class PeakMemory:
    """Peak resident memory (MiB) between ``start()`` and ``peak_mb()``.

    Example::

        meter = PeakMemory(); meter.start(); train(); meter.peak_mb(), meter.method
    """

    def __init__(self) -> None:
        self.method = "unstarted"
        self.start_mb: float | None = None

    def start(self) -> None:
        """Reset the high-water mark (where the OS allows it) and note the current resident size."""
        try:
            _CLEAR_REFS.write_text("5")
            self.method = "VmHWM reset via /proc/self/clear_refs"
        except OSError:
            self.method = "ru_maxrss (process lifetime peak)"
        rss = _status_kib("VmRSS")
        self.start_mb = None if rss is None else rss / 1024.0

    def peak_mb(self) -> float:
        """The peak resident size in MiB since ``start()`` (or the process peak, see ``method``)."""
        hwm = _status_kib("VmHWM") if self.method.startswith("VmHWM") else None
        if hwm is not None:
            return hwm / 1024.0
        maxrss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        # ru_maxrss is KiB on Linux, bytes on macOS.
        return maxrss / (1024.0 * 1024.0) if sys.platform == "darwin" else maxrss / 1024.0


@torch.no_grad()
def step_latency_ms(
    model: torch.nn.Module, x: torch.Tensor, *, steps: int = 32, repeats: int = 5
) -> float:
    """Median wall time of one ``model.step`` call in milliseconds, streaming ``x`` step by step.

    ``x``: (B, L, input_size); the first ``min(steps, L)`` steps are fed from a zero state, and the
    median over ``repeats`` passes of the mean per-step time is returned (one warm-up pass first).
    """
    was_training = model.training
    model.eval()
    length = min(steps, x.shape[1])
    columns = [x[:, t].contiguous() for t in range(length)]
    timings = []
    for repeat in range(repeats + 1):
        state = model.init_state(x.shape[0])
        begin = time.perf_counter()
        for column in columns:
            _, state = model.step(column, state)
        if repeat:
            timings.append((time.perf_counter() - begin) * 1000.0 / length)
    model.train(was_training)
    return statistics.median(timings)
