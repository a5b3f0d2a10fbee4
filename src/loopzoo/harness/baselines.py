"""Record bodies of a task's classical baselines, written by orchestration beside model runs."""

from __future__ import annotations

from typing import Any

from omegaconf import DictConfig

from loopzoo.engine.build import build_task
from loopzoo.engine.provenance import data_record, utc_now, versions
from loopzoo.engine.settings import read_settings

__all__ = ["baseline_records"]


def baseline_records(cfg: DictConfig) -> list[dict[str, Any]]:
    """One record body per classical baseline of the configured task (``task.baselines()``).

    Each has ``kind`` ``"baseline"``, ``model`` the baseline's name and test metrics only; the
    other record fields (parameters, cost, curves, gradient reach) are left to
    ``records.make_record``, which sets them null.

    Example::

        [b["model"] for b in baseline_records(cfg)]   # e.g. ["predict-mean", ...]
    """
    started = utc_now()
    settings = read_settings(cfg)
    task = build_task(settings)
    data = data_record(task)
    return [
        {
            "kind": "baseline", "status": "ok", "model": name, "task": settings.task,
            "suite": settings.suite, "seed": settings.seed, "budget": settings.budget,
            "sizes": {"input_size": task.input_size, "output_size": task.output_size,
                      "hidden_size": None},
            "versions": versions(), "primary": {"name": task.metric, "goal": task.goal},
            "metrics": {"test": {k: float(v) for k, v in metrics.items()}},
            "started": started, "finished": utc_now(), "data": data,
        }
        for name, metrics in task.baselines().items()
    ]
