"""The training settings of one run, read from the composed config and checked before training."""

from __future__ import annotations

import inspect
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import lightning as L
from omegaconf import DictConfig, OmegaConf

import loopzoo
from loopzoo._registry import unknown_choice
from loopzoo.engine.errors import ConfigError

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


def _positive_int(field: str, value: Any, *, allow_none: bool = False) -> int | None:
    if value is None and allow_none:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        accepted = "a positive integer" + (" or null" if allow_none else "")
        raise ConfigError(f"{field} = {value!r} is invalid; accepted: {accepted}")
    return value


def _real(field: str, value: Any, *, low: float, low_open: bool, allow_none: bool = False,
          high: float = math.inf) -> float | None:
    if value is None and allow_none:
        return None
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    ok = ok and (value > low if low_open else value >= low) and value <= high
    if not ok:
        bound = f"{'>' if low_open else '>='} {low}"
        bound += f" and <= {high}" if high < math.inf else ""
        accepted = f"a finite number {bound}" + (" or null" if allow_none else "")
        raise ConfigError(f"{field} = {value!r} is invalid; accepted: {accepted}")
    return float(value)


def read_settings(cfg: DictConfig | Mapping[str, Any]) -> RunSettings:
    """Check and read a composed run config; raises ConfigError naming the field and value.

    Example::

        settings = read_settings(cfg); settings.lr   # 0.003
    """
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
    seed = cfg.get("seed")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"seed = {seed!r} is invalid; accepted: a non-negative integer")

    max_steps = _positive_int("trainer.max_steps", trainer.pop("max_steps", None))
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
    lr = _real("optim.lr", optim.pop("lr", None), low=0.0, low_open=True)
    weight_decay = _real("optim.weight_decay", optim.pop("weight_decay", 0.0), low=0.0,
                         low_open=False)
    clip = _real("optim.grad_clip_norm", optim.pop("grad_clip_norm", None), low=0.0,
                 low_open=True, allow_none=True)

    protocol = dict(protocol)
    for key in TUNING_KEYS:  # the orchestration's tuning settings (loopzoo.harness.tuning)
        protocol.pop(key, None)
    val_every = _positive_int("protocol.val_every", protocol.pop("val_every", 50))
    patience = _positive_int("protocol.patience", protocol.pop("patience", None), allow_none=True)
    chunk = _positive_int("protocol.tbptt_chunk", protocol.pop("tbptt_chunk", None),
                          allow_none=True)
    select = protocol.pop("feedback_select", "free_running")
    if select not in FEEDBACK_SELECTIONS:
        raise ConfigError(f"protocol.feedback_select = {select!r} is invalid; accepted: "
                          f"{', '.join(FEEDBACK_SELECTIONS)}")
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
        batch_size=_positive_int("task.batch_size", task.get("batch_size")),
        budget=_positive_int("task.budget", task.get("budget")),
        seed=seed,
        suite=cfg.get("suite"),
        max_steps=max_steps,
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
