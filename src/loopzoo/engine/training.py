"""Train and evaluate one run under the fair protocol, and score a task's classical baselines.

The fair protocol: the hidden width is solved per topology from the task's parameter budget
(``loopzoo.width_for_budget``), every topology gets the same data and batch, training runs until
early stopping on validation (``protocol.patience`` validations without improvement;
``trainer.max_steps`` is a safety cap, and the record's ``convergence`` says which ended the
run), and the test split is evaluated once, with the best validation weights. The learning rate
and the topology's options are whatever the config holds: choosing them on validation is the
tuner's job (``loopzoo.harness.tuning``), which calls ``validation_run`` for each trial.
"""

from __future__ import annotations

import copy
import os
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import lightning as L
import torch
from omegaconf import DictConfig

import loopzoo
from loopzoo._io import json_safe
from loopzoo.diagnostics import gradient_reach
from loopzoo.engine.build import build_model, build_task
from loopzoo.engine.costs import PeakMemory, step_latency_ms
from loopzoo.engine.data import training_loader
from loopzoo.engine.errors import ConfigError, as_config_errors
from loopzoo.engine.evaluation import NonFinitePrediction, SplitScorer
from loopzoo.engine.lightning_setup import fit_quietly
from loopzoo.engine.module import SequenceModule
from loopzoo.engine.observed_feedback import (
    measured_feedback_exists,
    observed_plan,
    selected_group,
)
from loopzoo.engine.optimizers import optimizer_factory
from loopzoo.engine.progress import ConsoleProgress, FitProgress, ProgressView
from loopzoo.engine.provenance import data_record, utc_now, versions
from loopzoo.engine.schedules import TeacherForcingPlan
from loopzoo.engine.settings import RunSettings, read_settings

__all__ = ["convergence", "train_and_evaluate", "validation_run"]

_REACH_BATCH = 32
_REACH_MAX_LAG = 200


def _feedback_plan(settings: RunSettings, model: torch.nn.Module) -> TeacherForcingPlan:
    feeds_back = bool(getattr(model, "feeds_back_output", False))
    if settings.feedback is not None and not feeds_back:
        raise ConfigError(
            f"model.feedback = {settings.feedback} is set but model {settings.model!r} does not "
            "feed back its output; set model.feedback=null"
        )
    with as_config_errors():
        return TeacherForcingPlan.from_options(settings.feedback, total_steps=settings.max_steps)


def _check_protocol(settings: RunSettings, train_rows: int) -> None:
    if settings.batch_size > train_rows:
        raise ConfigError(
            f"task.batch_size = {settings.batch_size} exceeds the {train_rows} training sequences "
            f"of task {settings.task!r}; accepted: 1..{train_rows}"
        )


def _gradient_reach(model: torch.nn.Module, x: torch.Tensor) -> list[float]:
    """Raw norms of dL/d state for lags 0..min(T - 1, _REACH_MAX_LAG)."""
    return gradient_reach(model, x, max_lag=min(x.shape[1] - 1, _REACH_MAX_LAG))


class _Run:
    """One run's protocol state: the task, the initial model, the scorer, the fit timings."""

    def __init__(self, settings: RunSettings, task: Any, model: torch.nn.Module,
                 plan: TeacherForcingPlan, run_dir: Path, progress: ProgressView | None) -> None:
        self.settings = settings
        self.progress = progress if settings.show_progress else None
        self.task = task
        self.model = model
        self.plan = plan
        self.run_dir = run_dir
        self.feeds_back = bool(getattr(model, "feeds_back_output", False))
        self.train, self.val, self.test = (task.split(s) for s in ("train", "val", "test"))
        _check_protocol(settings, len(self.train.x))
        self.measured = self.feeds_back and measured_feedback_exists(task)
        self.select_group = (selected_group(settings.feedback_select, task) if self.feeds_back
                             else "plain")
        with as_config_errors():
            optimizer_factory(settings.optimizer, lr=settings.lr,
                              weight_decay=settings.weight_decay, extra=settings.optimizer_extra)
        self.fit_seconds = 0.0
        self.total_steps = 0
        self.val_seconds = 0.0

    def module(self, lr: float) -> SequenceModule:
        settings = self.settings
        make = optimizer_factory(settings.optimizer, lr=lr, weight_decay=settings.weight_decay,
                                 extra=settings.optimizer_extra)
        return SequenceModule(
            copy.deepcopy(self.model), self.task,
            SplitScorer(self.task, self.val, feeds_back=self.feeds_back, measured=self.measured),
            batch_size=settings.batch_size, optimizer=make,
            grad_clip_norm=settings.grad_clip_norm, plan=self.plan,
            tbptt_chunk=settings.tbptt_chunk, val_every=settings.val_every,
            primary=self.task.metric, goal=self.task.goal, select_group=self.select_group,
        )

    def fit(self, module: SequenceModule, loader: Any, *, end_step: int,
            patience: int | None) -> None:
        before = module.fit_state.step
        val_before = module.fit_state.val_seconds
        module.phase(end_step=end_step, patience=patience,
                     handoff=self.run_dir / ".fit-handoff.pt")
        callbacks = [] if self.progress is None else [FitProgress(self.progress)]
        self.fit_seconds += fit_quietly(module, loader, self.settings.trainer,
                                        run_dir=self.run_dir, callbacks=callbacks)
        module.take_handoff()
        self.total_steps += module.fit_state.step - before
        self.val_seconds += module.fit_state.val_seconds - val_before

    def fit_run(self, on_validation: Callable[[int, float], bool] | None = None
                ) -> SequenceModule:
        """Train with ``optim.lr`` until early stopping, the step cap, divergence or pruning."""
        settings = self.settings
        L.seed_everything(settings.seed, verbose=False)
        module = self.module(settings.lr)
        module.on_validation = on_validation
        self.fit(module, training_loader(self.train, settings.batch_size, settings.seed),
                 end_step=settings.max_steps, patience=settings.patience)
        return module


def convergence(state: Any, max_steps: int) -> dict[str, Any]:
    """How a run ended: ``stopped`` is early_stop, step_cap, diverged or pruned."""
    return {"stopped": state.stopped, "best_step": state.best_step, "steps": state.step,
            "max_steps": max_steps}


def _metrics(groups_val: dict[str, dict[str, float]], groups_test: dict[str, dict[str, float]],
             selected: str) -> dict[str, dict[str, float]]:
    """``val`` / ``test``: what a deployed model scores (for output feedback the selected
    configuration); output feedback adds every configuration it was scored in."""
    metrics = {"val": groups_val[selected], "test": groups_test[selected]}
    for group in groups_val:
        if group != "plain":
            metrics[f"val_{group}"] = groups_val[group]
            metrics[f"test_{group}"] = groups_test[group]
    return metrics


def train_and_evaluate(cfg: DictConfig, run_dir: Path, *,
                       progress: ProgressView | None = None) -> dict[str, Any]:
    """Train the configured topology on the configured task and return the record body.

    Training shows its progress on ``progress`` (default: ``ConsoleProgress`` on stdout) unless
    ``trainer.enable_progress_bar`` is false.

    The body holds every record field except ``schema``, ``run_id`` and ``config`` (added by the
    records module, which also turns non-finite numbers into null). Bad configs (unknown names or
    keys, impossible budgets) raise ConfigError before training; a run that diverges or fails
    returns ``status`` ``"diverged"`` / ``"failed"`` with the ``reason`` instead of raising.

    Example::

        body = train_and_evaluate(cfg, Path("runs/x/runs/adding-gru-s0-..."))
        body["metrics"]["test"]["mse"]
    """
    started, clock = utc_now(), time.perf_counter()
    run_dir = Path(run_dir)
    settings = read_settings(cfg)
    task = build_task(settings)
    model = build_model(settings, task)
    plan, plan_note = observed_plan(_feedback_plan(settings, model), task)
    if progress is None:
        progress = ConsoleProgress(f"{settings.model} {settings.task} seed={settings.seed}")
    run = _Run(settings, task, model, plan, run_dir, progress)
    body: dict[str, Any] = {
        "kind": "model", "status": "ok", "reason": None, "diverged_at_step": None,
        "model": settings.model, "task": settings.task, "suite": settings.suite,
        "seed": settings.seed, "params": sum(p.numel() for p in model.parameters()),
        "budget": settings.budget,
        "sizes": {"input_size": model.input_size, "output_size": model.output_size,
                  "hidden_size": model.hidden_size},
        "versions": versions(),
        "primary": {"name": task.metric, "goal": task.goal},
        "metrics": None, "lr": None, "convergence": None, "curves": None, "cost": None,
        "gradient_reach": None, "feedback": None, "started": started, "finished": None,
        "data": data_record(task),
    }
    if run.feeds_back:
        body["feedback"] = {**plan.describe(), "fed_back": model.options.get("fed_back"),
                            "selected_on": run.select_group,
                            "observable": task.observability(),
                            "delay": model.options.get("delay"), "note": plan_note}
    run_dir.mkdir(parents=True, exist_ok=True)
    try:
        _train(run, body)
    except Exception as error:  # noqa: BLE001 - a failing run is recorded, never raised
        body.update(status="failed", reason=f"{type(error).__name__}: {error}")
    body["finished"] = utc_now()
    if body["cost"] is not None:
        body["cost"]["wall_seconds"] = time.perf_counter() - clock
    return body


def validation_run(cfg: DictConfig, run_dir: Path,
                   on_validation: Callable[[int, float], bool] | None = None, *,
                   progress: ProgressView | None = None) -> dict[str, Any]:
    """Train ``cfg`` as a tuning trial: scored on validation only (the test split is never
    scored), no artifact, no cost measurements. Progress goes to ``progress`` (default: none)
    unless ``trainer.enable_progress_bar`` is false.

    ``on_validation(step, value)`` is called after every finite validation; returning True stops
    the run as pruned. Returns ``{"value"``: the best validation primary metric, or None when the
    run diverged, was pruned or never validated; ``"stopped"``, ``"steps"``, ``"seconds"}``.
    ``ConfigError`` for a config refused before training (e.g. an impossible budget).
    """
    clock = time.perf_counter()
    settings = read_settings(cfg)
    task = build_task(settings)
    model = build_model(settings, task)
    plan, _ = observed_plan(_feedback_plan(settings, model), task)
    run = _Run(settings, task, model, plan, Path(run_dir), progress)
    state = run.fit_run(on_validation).fit_state
    ended = convergence(state, settings.max_steps)
    usable = ended["stopped"] in ("early_stop", "step_cap") and state.best_val is not None
    return {"value": state.best_val if usable else None, "stopped": ended["stopped"],
            "steps": state.step, "seconds": time.perf_counter() - clock}


def _train(run: _Run, body: dict[str, Any]) -> None:
    reach_x = run.val.x[:_REACH_BATCH]
    reach_init = _gradient_reach(run.model, reach_x)
    memory = PeakMemory()
    memory.start()
    module = run.fit_run()
    peak_mb = memory.peak_mb()
    state = module.fit_state
    body["lr"] = {"chosen": run.settings.lr}
    body["convergence"] = convergence(state, run.settings.max_steps)
    body["curves"] = {"step": state.curve_steps, "train_loss": state.curve_train,
                      "val": state.curve_val}
    train_seconds = max(run.fit_seconds - run.val_seconds, 0.0)
    body["cost"] = {
        "wall_seconds": None, "train_seconds": train_seconds, "steps": state.step,
        "train_ms_per_step": 1000.0 * train_seconds / max(run.total_steps, 1),
        "clip_rate": state.clipped_steps / max(state.step, 1),
        "peak_memory_mb": peak_mb, "peak_memory_start_mb": memory.start_mb,
        "peak_memory_method": memory.method,
        "step_latency_ms": None, "batched_step_latency_ms": None, "batched_batch_size": None,
    }
    if state.diverged:
        body.update(status="diverged", reason=state.reason, diverged_at_step=state.diverged_at)
        return
    if state.best_weights is None:
        body.update(status="failed", reason="training ended before its first validation")
        return
    model = module.model
    model.load_state_dict(state.best_weights)
    try:
        val = SplitScorer(run.task, run.val, feeds_back=run.feeds_back,
                          measured=run.measured).score(model)
        test = SplitScorer(run.task, run.test, feeds_back=run.feeds_back,
                           measured=run.measured).score(model)
    except NonFinitePrediction as error:
        body.update(status="diverged", reason=f"{error} (after training, best weights)")
        return
    body["metrics"] = _metrics(val, test, run.select_group)
    metadata = {"task": run.settings.task, "task_options": run.settings.task_options,
                "seed": run.settings.seed, "metrics": body["metrics"]["test"]}
    saved = loopzoo.save(model, run.run_dir / "artifact", json_safe(metadata),
                         preprocessing=run.task.preprocessing())
    # Relative to the output directory (DIR/runs/<run_id>/artifact), so DIR can be moved.
    body["artifact"] = Path(os.path.relpath(saved, run.run_dir.parent.parent)).as_posix()
    batched = min(run.settings.batch_size, len(run.val.x))
    body["cost"].update(
        step_latency_ms=step_latency_ms(model, run.val.x[:1]),
        batched_step_latency_ms=step_latency_ms(model, run.val.x[:batched]),
        batched_batch_size=batched,
    )
    body["gradient_reach"] = _reach_record(reach_init, _gradient_reach(model, reach_x))


def _reach_record(init: list[float], final: list[float]) -> dict[str, Any]:
    """Lag-0-normalised reach at initialisation and after training, with the raw norms."""

    def normalised(norms: list[float]) -> list[float]:
        return [n / norms[0] for n in norms] if norms[0] > 0.0 else list(norms)

    return {"lags": list(range(len(init))), "init": normalised(init), "final": normalised(final),
            "init_raw": init, "final_raw": final}
