"""Build a run's task and its model from checked settings; library errors become ConfigError."""

from __future__ import annotations

from typing import Any

import lightning as L
import torch

import loopzoo
from loopzoo.engine.errors import ConfigError
from loopzoo.engine.observed_feedback import delay_option
from loopzoo.engine.settings import RunSettings

__all__ = ["build_model", "build_task", "model_options"]


def build_task(settings: RunSettings) -> Any:
    """The configured task, built with the run's seed (``loopzoo.tasks.create``), its parts
    made: data a task refuses only when splitting it (a class too small for every part) is a
    refused config too, never a failed run."""
    try:
        task = loopzoo.tasks.create(settings.task, seed=settings.seed, **settings.task_options)
        task.split("train")  # builds and caches every part
    except (ValueError, TypeError, KeyError) as error:
        raise ConfigError(f"task {settings.task!r}: {error}") from error
    return task


def model_options(settings: RunSettings, task: Any) -> dict[str, Any]:
    """The configured options, plus for output feedback the ``delay`` the task's observations
    allow (``loopzoo.engine.observed_feedback``)."""
    options = dict(settings.model_options)
    if settings.model in loopzoo.available() and getattr(
        loopzoo.topologies.TOPOLOGIES.get(settings.model), "feeds_back_output", False
    ):
        options["delay"] = delay_option(task, options)
    return options


def build_model(settings: RunSettings, task: Any) -> torch.nn.Module:
    """The configured topology at the hidden width that meets ``task.budget``, seeded."""
    sizes = {"input_size": task.input_size, "output_size": task.output_size}
    options = model_options(settings, task)
    try:
        hidden = loopzoo.width_for_budget(
            settings.model, params=settings.budget, **sizes, **options
        )
    except (ValueError, TypeError) as error:
        raise ConfigError(
            f"task.budget = {settings.budget} cannot be met by model {settings.model!r} with "
            f"options {options}: {error}"
        ) from error
    L.seed_everything(settings.seed, verbose=False)
    try:
        return loopzoo.create(settings.model, hidden_size=hidden, **sizes, **options)
    except (ValueError, TypeError) as error:
        raise ConfigError(f"model {settings.model!r}: {error}") from error
