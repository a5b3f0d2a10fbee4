"""Shared tasks: synthetic probes, open datasets that installed packages ship, the user's files.

    import loopzoo
    loopzoo.tasks.available()                     # registered task names
    task = loopzoo.tasks.create("adding", seed=0, length=100)
    split = task.split("train")                   # .x (N, T, I), .y, .mask (N, T), .lengths (N,)
    task.score(prediction, split)                 # {"mse": ..., ...} in the data's own units

statsmodels and scikit-learn are imported only inside the loaders and baselines that need them.
"""

from __future__ import annotations

import importlib
from typing import Any

from loopzoo.tasks._base import SPLITS, ClassificationTask, RegressionTask, Split, Task
from loopzoo.tasks._catalog import TASKS

__all__ = [
    "SPLITS",
    "TASKS",
    "ClassificationTask",
    "RegressionTask",
    "Split",
    "Task",
    "available",
    "create",
]

# Importing a task file registers its tasks; this order (probes, open data, the user's files) is
# the order of ``available()``.
TASK_FILES = ("long_lag", "parity", "reber", "sines", "fleet_log", "open_series", "digits",
              "csv_file", "text_file")
for _file in TASK_FILES:
    importlib.import_module(f"loopzoo.tasks.{_file}")


def available() -> list[str]:
    """Registered task names."""
    return TASKS.names()


def create(name: str, seed: int = 0, **options: Any) -> Task:
    """Build the task registered as ``name``; unknown names and options list the accepted ones.

    Example:
        >>> task = loopzoo.tasks.create("copy", seed=3, length=200)
    """
    return TASKS.get(name)(seed=seed, **options)
