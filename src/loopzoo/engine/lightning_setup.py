"""A quiet, cheap Lightning Trainer for one training phase, and its process-group clean-up."""

from __future__ import annotations

import logging
import time
import warnings
from pathlib import Path
from typing import Any

import lightning as L
import torch.distributed as dist

__all__ = ["ReleaseProcessGroup", "fit_quietly"]

# Settings that keep a run from writing checkpoints, logger folders or summaries it does not need;
# the user's trainer config is applied on top, so e.g. trainer.logger=true brings a logger back.
_QUIET = {
    "logger": False,
    "enable_checkpointing": False,
    "enable_model_summary": False,
    "num_sanity_val_steps": 0,
    "max_epochs": -1,
    # Lightning's bar redraws per epoch (hundreds of kB of log on a short file); runs show
    # loopzoo's own progress instead (engine.progress).
    "enable_progress_bar": False,
}

_CHATTY_LOGGERS = ("lightning.pytorch.utilities.rank_zero", "lightning.fabric.utilities.rank_zero",
                   "lightning.pytorch.accelerators.cuda")


class ReleaseProcessGroup(L.Callback):
    """Destroy the gloo process group when a (spawned) DDP fit ends.

    Left alive, it makes the process abort at exit ("terminate called without an active
    exception", exit code 134) on this stack.
    """

    def teardown(self, trainer: L.Trainer, pl_module: L.LightningModule, stage: str) -> None:
        if dist.is_available() and dist.is_initialized():
            dist.destroy_process_group()


def fit_quietly(module: L.LightningModule, loader: Any, trainer_options: dict[str, Any], *,
                run_dir: Path, callbacks: list[L.Callback] | None = None) -> float:
    """Fit ``module`` on ``loader`` until the module sets ``trainer.should_stop``; wall seconds.

    The module counts its own optimiser steps and stops itself (the Trainer runs without a step
    or epoch limit). ``trainer_options`` are Lightning Trainer keyword arguments passed through
    (accelerator, devices, strategy, ...); ``callbacks`` (e.g. ``progress.FitProgress``) are
    added to the Trainer's.

    Example::

        module.phase(end_step=600, patience=4)
        seconds = fit_quietly(module, loader, {"accelerator": "cpu"}, run_dir=path)
    """
    for name in _CHATTY_LOGGERS:
        logging.getLogger(name).setLevel(logging.WARNING)
    options = {**_QUIET, "default_root_dir": str(run_dir), **trainer_options}
    begin = time.perf_counter()
    with warnings.catch_warnings():
        # Data lives in memory and batches are slices: worker processes would only add cost.
        warnings.filterwarnings("ignore", message=".*does not have many workers.*")
        warnings.filterwarnings("ignore", message=".*smaller than the logging interval.*")
        warnings.filterwarnings("ignore", message=".*LeafSpec.*")
        trainer = L.Trainer(max_steps=-1, **options)
        trainer.callbacks.extend(callbacks or [])
        if trainer.world_size > 1:
            # Only then: every callback costs a call per hook per step.
            trainer.callbacks.append(ReleaseProcessGroup())
        trainer.fit(module, train_dataloaders=loader)
    return time.perf_counter() - begin
