"""The training settings of one run, read from the composed config and checked before training."""

from __future__ import annotations

import inspect
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import lightning as L
from omegaconf import DictConfig, OmegaConf

import loopzoo
from loopzoo import _checks as checks
from loopzoo._registry import unknown_choice
from loopzoo.engine.errors import ConfigError, as_config_errors

__all__ = ["FEEDBACK_SELECTIONS", "TUNING_KEYS", "RunSettings", "read_settings"]

FEEDBACK_SELECTIONS = ("free_running", "measured_feedback")
# protocol keys read by the tuning orchestration, not by a single run.
TUNING_KEYS = ("trials", "sampler", "pruner", "storage", "space")

# Trainer arguments the training engine sets itself; passing them would break its protocol.
_RESERVED_TRAINER_KEYS = {
    "gradient_clip_val": "optim.grad_clip_norm",
    "gradient_clip_algorithm": "optim.grad_clip_norm",
    "max_epochs": "trainer.max_steps",
    "accumulate_grad_batches": "task.batch_size",
    "val_check_interval": "protocol.val_every",
    "check_val_every_n_epoch": "protocol.val_every",
    "callbacks": "nothing (the engine owns its callbacks)",
}


@dataclass(frozen=True)
class RunSettings:
    """Everything the training engine reads from a config, validated."""

    model: str
    model_options: dict[str, Any]
    feedback: dict[str, Any] | None
    task: str
    task_options: dict[str, Any]
    batch_size: int
    budget: int
    seed: int
    suite: str | None
    max_steps: int
    show_progress: bool
    trainer: dict[str, Any]
    optimizer: str
    lr: float
    weight_decay: float
    grad_clip_norm: float | None
    optimizer_extra: dict[str, Any]
    val_every: int
    patience: int | None
    tbptt_chunk: int | None
    feedback_select: str


def _section(cfg: Mapping[str, Any], name: str) -> dict[str, Any]:
    value = cfg.get(name)
    if not isinstance(value, Mapping):
        raise ConfigError(f"config section {name!r} is missing or not a mapping, got {value!r}")
    return dict(value)


def _count(field: str, value: Any, *, allow_none: bool = False) -> int | None:
    """A positive integer (or None where the setting may be switched off)."""
    return None if value is None and allow_none else checks.integer(field, value, minimum=1)


def read_settings(cfg: DictConfig | Mapping[str, Any]) -> RunSettings:
    """Check and read a composed run config; raises ConfigError naming the field and value.

    Example::

        settings = read_settings(cfg); settings.lr   # 0.003
    """
    with as_config_errors():
        return _read_settings(cfg)


def _read_settings(cfg: DictConfig | Mapping[str, Any]) -> RunSettings:
    if isinstance(cfg, DictConfig):
        cfg = OmegaConf.to_container(cfg, resolve=True)
    model, task = _section(cfg, "model"), _section(cfg, "task")
    trainer, optim = _section(cfg, "trainer"), _section(cfg, "optim")
    protocol = _section(cfg, "protocol")

    for field, value, names in (("model.name", model.get("name"), loopzoo.available()),
                                ("task.name", task.get("name"), loopzoo.tasks.available())):
        if value not in names:
            raise ConfigError(str(unknown_choice(field, value, names)))
    feedback = model.get("feedback")
    if feedback is not None and not isinstance(feedback, Mapping):
        raise ConfigError(f"model.feedback = {feedback!r} is invalid; accepted: a mapping or null")
    seed = checks.integer("seed", cfg.get("seed"), minimum=0)
    max_steps = _count("trainer.max_steps", trainer.pop("max_steps", None))
    # The switch of loopzoo's own progress display (engine.progress); Lightning's bar stays off.
    show_progress = checks.boolean("trainer.enable_progress_bar",
                                   trainer.pop("enable_progress_bar", True))
    for key, instead in _RESERVED_TRAINER_KEYS.items():
        if key in trainer:
            raise ConfigError(f"trainer.{key} is set by the training engine; use {instead}")
    accepted = [name for name in inspect.signature(L.Trainer.__init__).parameters
                if name != "self"]
    for key in trainer:
        if key not in accepted:
            error = unknown_choice("Lightning Trainer argument", key, accepted)
            raise ConfigError(f"trainer.{key}: {error}")

    optim = dict(optim)
    optimizer = optim.pop("name", None)
    lr = checks.real("optim.lr", optim.pop("lr", None), low=0.0, low_open=True)
    weight_decay = checks.real("optim.weight_decay", optim.pop("weight_decay", 0.0), low=0.0)
    clip = optim.pop("grad_clip_norm", None)
    if clip is not None:
        clip = checks.real("optim.grad_clip_norm", clip, low=0.0, low_open=True)

    protocol = dict(protocol)
    for key in TUNING_KEYS:  # the orchestration's tuning settings (loopzoo.harness.tuning)
        protocol.pop(key, None)
    val_every = _count("protocol.val_every", protocol.pop("val_every", 50))
    patience = _count("protocol.patience", protocol.pop("patience", None), allow_none=True)
    chunk = _count("protocol.tbptt_chunk", protocol.pop("tbptt_chunk", None), allow_none=True)
    select = checks.choice("protocol.feedback_select",
                           protocol.pop("feedback_select", "free_running"), FEEDBACK_SELECTIONS)
    if protocol:
        raise ConfigError(f"protocol keys {sorted(protocol)} are unknown; accepted: "
                          f"{', '.join(TUNING_KEYS)}, val_every, patience, tbptt_chunk, "
                          "feedback_select")

    options = task.get("options") or {}
    if not isinstance(options, Mapping):
        raise ConfigError(f"task.options = {options!r} is invalid; accepted: a mapping")
    model_options = model.get("options") or {}
    if not isinstance(model_options, Mapping):
        raise ConfigError(f"model.options = {model_options!r} is invalid; accepted: a mapping")
    return RunSettings(
        model=model["name"],
        model_options=dict(model_options),
        feedback=None if feedback is None else dict(feedback),
        task=task["name"],
        task_options=dict(options),
        batch_size=_count("task.batch_size", task.get("batch_size")),
        budget=_count("task.budget", task.get("budget")),
        seed=seed,
        suite=cfg.get("suite"),
        max_steps=max_steps,
        show_progress=show_progress,
        trainer=trainer,
        optimizer=optimizer,
        lr=lr,
        weight_decay=weight_decay,
        grad_clip_norm=clip,
        optimizer_extra=optim,
        val_every=val_every,
        patience=patience,
        tbptt_chunk=chunk,
        feedback_select=select,
    )
