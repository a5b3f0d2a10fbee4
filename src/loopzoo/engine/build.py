"""Build a run's task and its model from checked settings; library errors become ConfigError."""

from __future__ import annotations

from typing import Any

import lightning as L
import torch

import loopzoo
from loopzoo.engine.errors import ConfigError
from loopzoo.engine.settings import RunSettings

__all__ = ["build_model", "build_task"]


def build_task(settings: RunSettings) -> Any:
    """The configured task, built with the run's seed (``loopzoo.tasks.create``)."""
    try:
        return loopzoo.tasks.create(settings.task, seed=settings.seed, **settings.task_options)
    except (ValueError, TypeError, KeyError) as error:
        raise ConfigError(f"task {settings.task!r}: {error}") from error


def build_model(settings: RunSettings, task: Any) -> torch.nn.Module:
    """The configured topology at the hidden width that meets ``task.budget``, seeded."""
    sizes = {"input_size": task.input_size, "output_size": task.output_size}
    try:
        hidden = loopzoo.width_for_budget(
            settings.model, params=settings.budget, **sizes, **settings.model_options
        )
    except (ValueError, TypeError) as error:
        raise ConfigError(
            f"task.budget = {settings.budget} cannot be met by model {settings.model!r} with "
            f"options {settings.model_options}: {error}"
        ) from error
    L.seed_everything(settings.seed, verbose=False)
    try:
        return loopzoo.create(
            settings.model, hidden_size=hidden, **sizes, **settings.model_options
        )
    except (ValueError, TypeError) as error:
        raise ConfigError(f"model {settings.model!r}: {error}") from error
