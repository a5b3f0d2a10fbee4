"""Scratch state of an output directory: locks, the sweep plan and its progress count.

Everything lives under ``DIR/.state`` so it never mixes with records. Locks are ``flock``
advisory locks: the kernel releases them when their process dies, even by SIGKILL.
"""

from __future__ import annotations

import fcntl
import json
import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from loopzoo._io import atomic_write_json
from loopzoo.harness.errors import OutDirError

__all__ = [
    "SWEEP_TOKEN", "JOB_INDEX", "state_dir", "file_lock", "sweep_lock", "write_plan",
    "planned_job", "read_plan", "count_finished", "end_plan",
]

SWEEP_TOKEN = "LOOPZOO_SWEEP_TOKEN"  # environment variable: the sweep a job was launched by
JOB_INDEX = "sweep_job"  # the launcher's one sweep key: a job's place in the sweep plan


def state_dir(out: str | Path) -> Path:
    """``out/.state``, created on demand."""
    folder = Path(out) / ".state"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


@contextmanager
def file_lock(path: Path, *, wait: bool = True) -> Iterator[bool]:
    """Hold an exclusive lock on ``path``; with ``wait=False`` yield False if it is taken."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
        except BlockingIOError:
            yield False
            return
        yield True
    finally:
        os.close(fd)  # closing releases the lock


@contextmanager
def sweep_lock(out: str | Path) -> Iterator[None]:
    """One sweep at a time per output directory; a second one is refused, not interleaved."""
    with file_lock(state_dir(out) / "sweep.lock", wait=False) as taken:
        if not taken:
            raise OutDirError(
                f"out={out} is in use by another running sweep; wait for it or choose another out"
            )
        yield


def write_plan(out: str | Path, jobs: list[dict[str, Any]]) -> str:
    """Start a sweep's progress count at 0 of ``len(jobs)``; returns the sweep's token.

    Each job's finished config is kept for ``planned_job`` under its place in ``jobs``, so a
    launched job reads it instead of composing again. The launcher hands the token to each job
    it runs in the environment variable ``SWEEP_TOKEN``; jobs of an earlier sweep whose parent
    was killed (orphaned workers still finishing their runs) carry another token and are not
    counted in this plan.
    """
    token = uuid.uuid4().hex
    folder = state_dir(out)
    atomic_write_json(folder / "jobs.json", jobs)
    atomic_write_json(folder / "plan.json",
                      {"total": len(jobs), "finished": [], "token": token})
    return token


def planned_job(out: str | Path, index: int) -> dict[str, Any] | None:
    """The finished config ``write_plan`` kept for job number ``index``, or None."""
    path = Path(out) / ".state" / "jobs.json"
    if not path.exists():
        return None
    jobs = json.loads(path.read_text(encoding="utf-8"))
    return jobs[index] if 0 <= index < len(jobs) else None


def end_plan(out: str | Path) -> None:
    """Remove the plan and its jobs once the sweep is over."""
    for name in ("plan.json", "jobs.json"):
        (Path(out) / ".state" / name).unlink(missing_ok=True)


def read_plan(out: str | Path) -> dict[str, Any] | None:
    """The current sweep plan, or None outside a sweep."""
    path = Path(out) / ".state" / "plan.json"
    if not path.exists():
        return None
    return json.loads(path.read_text(encoding="utf-8"))


def count_finished(out: str | Path, outcome: dict[str, Any]) -> tuple[int, int] | None:
    """Add ``outcome`` to the sweep plan; return (finished so far, total), or None if there is
    no plan or the calling job belongs to another sweep."""
    with file_lock(state_dir(out) / "plan.lock"):
        plan = read_plan(out)
        if plan is None:
            return None
        token = os.environ.get(SWEEP_TOKEN)
        if token is not None and token != plan.get("token"):
            return None  # a job of an earlier, killed sweep: not part of this plan
        plan["finished"].append(outcome)
        atomic_write_json(state_dir(out) / "plan.json", plan)
        return len(plan["finished"]), plan["total"]
