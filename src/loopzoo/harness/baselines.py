"""Record bodies of a task's classical baselines, written by orchestration beside model runs."""

from __future__ import annotations

from typing import Any

from omegaconf import DictConfig

from loopzoo.engine.build import build_task
from loopzoo.engine.provenance import data_record, utc_now, versions
from loopzoo.engine.settings import read_settings

__all__ = ["baseline_records"]


def baseline_records(cfg: DictConfig) -> list[dict[str, Any]]:
    """One record body per row of ``task.baselines()`` and ``task.bounds()``.

    Each has ``kind`` (``"baseline"``, ``"bound"`` or ``"reference"``), ``model`` the row's
    name, ``status`` ``ok`` with test metrics or ``skipped`` with the ``reason``,
    ``seed_dependent``, ``details`` (what was chosen on train / val) and ``cost.fit_seconds``;
    the other record fields (parameters, curves, gradient reach) are left to
    ``records.make_record``, which sets them null.

    Example::

        [b["model"] for b in baseline_records(cfg)]   # e.g. ["persistence", "ar", ...]
    """
    started = utc_now()
    settings = read_settings(cfg)
    task = build_task(settings)
    data = data_record(task)
    return [
        {
            "kind": row.kind, "status": row.status, "reason": row.reason,
            "seed_dependent": row.seed_dependent, "details": row.details,
            "model": name, "task": settings.task, "suite": settings.suite, "seed": settings.seed,
            "budget": settings.budget,
            "sizes": {"input_size": task.input_size, "output_size": task.output_size,
                      "hidden_size": None},
            "versions": versions(), "primary": {"name": task.metric, "goal": task.goal},
            "metrics": ({"test": {k: float(v) for k, v in row.metrics.items()}}
                        if row.status == "ok" else {}),
            "cost": {"fit_seconds": row.fit_seconds},
            "started": started, "finished": utc_now(), "data": data,
        }
        for name, row in {**task.baselines(), **task.bounds()}.items()
    ]
