"""The running jobs of a sweep: each job's progress file, and the sweep process's display of them.

Jobs run in launcher worker processes (or on cluster nodes), so they cannot share one terminal
widget. Each running job keeps its latest progress in ``DIR/.state/progress/<run_id>.json``
(written atomically, at most every ``WRITE_EVERY`` seconds, removed when the job's training
ends); the process that started the sweep reads these files while the launcher runs and shows
them: one live tqdm line on a terminal, a plain summary every ``SHOW_EVERY`` seconds otherwise.
Files of other sweeps, of dead processes on this host, or not updated for ``STALE_AFTER``
seconds are ignored.
"""

from __future__ import annotations

import json
import os
import socket
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import asdict
from pathlib import Path
from typing import Any, TextIO

from omegaconf import DictConfig

from loopzoo._io import atomic_write_json
from loopzoo.engine.progress import ProgressView, Snapshot, live_bar
from loopzoo.harness import state

__all__ = ["Phase", "ProgressFile", "RunningDisplay", "ViewFactory", "clear", "job_progress",
           "over_status_line", "phase_name", "running_jobs", "status_word", "summary_line"]

WRITE_EVERY = 2.0  # least seconds between two writes of a job's progress file
STALE_AFTER = 600.0  # a file not updated for this long belongs to a job that is gone
SHOW_EVERY = 30.0  # seconds between plain summaries when stdout is not a terminal
REDRAW_EVERY = 1.0  # seconds between redraws of the live line on a terminal

# A trial number and the study's trial budget, or None for the run with the chosen values.
Phase = tuple[int, int] | None
ViewFactory = Callable[[Phase], ProgressView]


def _folder(out: str | Path) -> Path:
    return Path(out) / ".state" / "progress"


def clear(out: str | Path) -> None:
    """Remove every progress file (at sweep start, under the sweep lock: leftovers of killed
    jobs)."""
    for path in _folder(out).glob("*.json"):
        path.unlink(missing_ok=True)


def phase_name(phase: Phase) -> str:
    """``trial #3 of 12`` (Optuna's trial number) or ``final run``."""
    return "final run" if phase is None else f"trial #{phase[0]} of {phase[1]}"


class ProgressFile:
    """A ``ProgressView`` that keeps a fit's latest snapshot in one JSON file, with the job's
    identity (``job``) and ``phase``."""

    def __init__(self, path: Path, job: dict[str, Any], phase: str) -> None:
        self.path = path
        self.job = job
        self.phase = phase
        self._last = 0.0

    def _write(self, snapshot: Snapshot, stopped: str | None = None) -> None:
        self._last = time.monotonic()
        atomic_write_json(self.path, {**self.job, "phase": self.phase, "stopped": stopped,
                                      "snapshot": asdict(snapshot), "updated": time.time()})

    def start(self, snapshot: Snapshot) -> None:
        self._write(snapshot)

    def update(self, snapshot: Snapshot, *, validated: bool) -> None:
        if time.monotonic() - self._last >= WRITE_EVERY:
            self._write(snapshot)

    def finish(self, snapshot: Snapshot, stopped: str) -> None:
        self._write(snapshot, stopped)


@contextmanager
def job_progress(out: str | Path, run_id: str, cfg: DictConfig) -> Iterator[ViewFactory]:
    """Views writing the job ``run_id``'s progress file, one per phase; the file is removed
    when the block ends (however it ends)."""
    path = _folder(out) / f"{run_id}.json"
    job = {"run_id": run_id, "model": str(cfg.model.name), "task": str(cfg.task.name),
           "seed": int(cfg.seed), "pid": os.getpid(), "host": socket.gethostname(),
           "token": os.environ.get(state.SWEEP_TOKEN)}
    try:
        yield lambda phase: ProgressFile(path, job, phase_name(phase))
    finally:
        path.unlink(missing_ok=True)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def running_jobs(out: str | Path, token: str | None,
                 now: float | None = None) -> list[dict[str, Any]]:
    """The progress entries of the sweep ``token``'s running jobs, by run id."""
    now = time.time() if now is None else now
    host = socket.gethostname()
    found = []
    for path in sorted(_folder(out).glob("*.json")):
        try:
            entry = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):  # removed since the listing
            continue
        if entry.get("token") != token or now - entry.get("updated", 0.0) > STALE_AFTER:
            continue
        if entry.get("host") == host and not _alive(int(entry.get("pid", 0))):
            continue
        found.append(entry)
    return found


def status_word(entry: dict[str, Any]) -> str:
    """``trial #3 of 12`` while training, ``trial #3 of 12 early_stop`` once the fit ended."""
    return entry["phase"] + (f" {entry['stopped']}" if entry.get("stopped") else "")


def summary_line(entry: dict[str, Any]) -> str:
    """``gru adding seed=0 final run: step 120/600, loss ..., val mse ... (best ...), 41 s``."""
    snapshot = Snapshot(**entry["snapshot"])
    return (f"{entry['model']} {entry['task']} seed={entry['seed']} {status_word(entry)}: "
            f"{snapshot.fields()}, {snapshot.seconds:.0f} s")


def _compact(entry: dict[str, Any]) -> str:
    snapshot = Snapshot(**entry["snapshot"])
    val = "-" if snapshot.val is None else f"{snapshot.val:.3g}"
    return (f"{entry['model']}/{entry['task']}/s{entry['seed']} {status_word(entry)} "
            f"{snapshot.step}/{snapshot.max_steps} val {val}")


def over_status_line(text: str) -> str:
    """``text`` prefixed, on a terminal, with a carriage return and erase-line, so a job's line
    replaces the sweep's live line (redrawn below it) instead of running into it."""
    return "\r\x1b[K" + text if sys.stdout.isatty() else text


class RunningDisplay:
    """While the launcher runs (``with RunningDisplay(...):``), a background thread shows the
    running jobs of sweep ``token`` among ``total`` jobs: on a terminal one live line (finished
    count, each running job's phase, step and validation), otherwise every ``SHOW_EVERY``
    seconds a ``running`` line and one line per running job."""

    def __init__(self, out: str | Path, token: str, total: int, *,
                 stream: TextIO | None = None) -> None:
        self.out = out
        self.token = token
        self.total = total
        self.stream = stream or sys.stdout
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="loopzoo-running", daemon=True)

    def __enter__(self) -> RunningDisplay:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()

    def _finished(self) -> int:
        plan = state.read_plan(self.out)
        return len(plan["finished"]) if plan else 0

    def _loop(self) -> None:
        if self.stream.isatty():
            self._live()
            return
        while not self._stop.wait(SHOW_EVERY):
            jobs = running_jobs(self.out, self.token)
            if jobs:
                lines = [f"running: {len(jobs)} of {self.total} jobs, {self._finished()} "
                         "finished",
                         *(f"  {summary_line(entry)}" for entry in jobs)]
                print("\n".join(lines), file=self.stream, flush=True)

    def _live(self) -> None:
        bar = live_bar(self.stream, total=self.total, desc="sweep",
                       bar_format="{desc} {n}/{total} done {elapsed}{postfix}")
        try:
            while not self._stop.wait(REDRAW_EVERY):
                bar.n = self._finished()
                jobs = running_jobs(self.out, self.token)
                bar.set_postfix_str("; ".join(_compact(entry) for entry in jobs), refresh=False)
                bar.refresh()
        finally:
            bar.close()
