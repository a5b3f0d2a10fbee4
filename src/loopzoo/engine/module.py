"""One LightningModule that trains any topology on any task.

Optimisation is manual (``automatic_optimization = False``) for three reasons: truncated BPTT
needs several optimiser steps per batch with the detached state carried between them (Lightning 2
has no built-in), the clip rate needs the pre-clipping gradient norm of every step, and a
non-finite step must stop the run before the optimiser applies it.

Each Lightning ``training_step`` call receives several batches (``training_loader`` fetches
``BATCHES_PER_FETCH`` at a time) and takes one optimiser step per batch, so Lightning's per-call
loop cost is shared by several steps; the steps are the same as with one batch per call.

Validation runs inside the training step every ``val_every`` optimiser steps on the whole
validation split, scored by ``task.score`` (a task metric over the full split, not a mean of
per-batch values). Every DDP rank computes the same score from the same synchronised weights, so
all ranks take the same early-stopping decision without a collective.
"""

from __future__ import annotations

import copy
import math
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import lightning as L
import torch

from loopzoo.engine.evaluation import NonFinitePrediction, SplitScorer, better
from loopzoo.engine.objectives import masked_loss
from loopzoo.engine.schedules import TeacherForcingPlan
from loopzoo.engine.tbptt import chunk_spans, detach_state

__all__ = ["FitState", "SequenceModule"]


@dataclass
class FitState:
    """What training has done so far."""

    step: int = 0
    curve_steps: list[int] = field(default_factory=list)
    curve_train: list[float] = field(default_factory=list)
    curve_val: list[float] = field(default_factory=list)
    best_val: float | None = None
    best_step: int | None = None
    best_weights: dict[str, torch.Tensor] | None = None
    stale_validations: int = 0
    early_stopped: bool = False
    pruned: bool = False
    diverged_at: int | None = None
    reason: str | None = None
    clipped_steps: int = 0
    val_seconds: float = 0.0
    loss_sum: float = 0.0
    loss_count: int = 0

    @property
    def diverged(self) -> bool:
        return self.diverged_at is not None

    @property
    def stopped(self) -> str:
        """How the fit ended (or would, if it ended now): diverged, pruned, early_stop or
        step_cap."""
        if self.diverged:
            return "diverged"
        if self.pruned:
            return "pruned"
        return "early_stop" if self.early_stopped else "step_cap"


class SequenceModule(L.LightningModule):
    """Trains ``model`` on ``task`` batches ``(x, y, mask)`` with masked losses.

    A fetched batch of several ``batch_size`` batches is split into them, one step each. Each
    optimiser step: forward a chunk (the whole sequence without TBPTT) from the carried state,
    ``masked_loss``, backward, clip the gradient norm to ``grad_clip_norm`` (``None``: measure
    only), stop as diverged on a non-finite norm, step, detach the state. Feedback topologies get
    ``targets`` and ``teacher_forcing=plan.probability(step)``.

    Example::

        module = SequenceModule(model, task, scorer, batch_size=64,
                                optimizer=partial(torch.optim.Adam, lr=3e-3),
                                grad_clip_norm=1.0, plan=TeacherForcingPlan("teacher_forcing"),
                                tbptt_chunk=None, val_every=50, primary="mse", goal="min",
                                select_group="plain")
        module.phase(end_step=600, patience=4)
        fit_quietly(module, training_loader(task.split("train"), 64, seed=0), {}, run_dir=path)
    """

    def __init__(
        self,
        model: torch.nn.Module,
        task: Any,
        scorer: SplitScorer,
        *,
        batch_size: int,
        optimizer: Any,
        grad_clip_norm: float | None,
        plan: TeacherForcingPlan,
        tbptt_chunk: int | None,
        val_every: int,
        primary: str,
        goal: str,
        select_group: str,
    ) -> None:
        super().__init__()
        self.automatic_optimization = False
        self.model = model
        self.kind = task.kind
        self.scorer = scorer
        self.batch_size = batch_size
        self.make_optimizer = optimizer
        self.grad_clip_norm = grad_clip_norm
        self.plan = plan
        self.tbptt_chunk = tbptt_chunk
        self.val_every = val_every
        self.primary = primary
        self.goal = goal
        self.select_group = select_group
        self.feeds_back = bool(getattr(model, "feeds_back_output", False))
        self.fit_state = FitState()
        self.optimizer: torch.optim.Optimizer | None = None
        self.end_step = 0
        self.patience: int | None = None
        self.handoff: Path | None = None
        self.distributed = False
        # Called as on_validation(step, value) after each finite validation; True stops the run
        # as pruned (a tuner's pruner cutting an unpromising trial).
        self.on_validation: Callable[[int, float], bool] | None = None

    def phase(self, *, end_step: int, patience: int | None, handoff: Path | None = None) -> None:
        """Set the next fit to train until ``end_step`` total steps, early stopping after
        ``patience`` stale validations (``None``: never). ``handoff`` is where a spawned rank 0
        leaves the fit state for the launching process."""
        self.end_step = end_step
        self.patience = patience
        self.handoff = handoff
        self.fit_state.stale_validations = 0
        self.fit_state.early_stopped = False

    def on_fit_start(self) -> None:
        self.distributed = self.trainer.world_size > 1

    def configure_optimizers(self) -> torch.optim.Optimizer:
        # Kept across fits so that continuing after the lr probe keeps the optimiser's moments.
        if self.optimizer is None:
            self.optimizer = self.make_optimizer(self.model.parameters())
        return self.optimizer

    def transfer_batch_to_device(self, batch: Any, device: torch.device,
                                 dataloader_idx: int) -> Any:
        # Batches are already CPU tensors; skip Lightning's per-step walk over the collection.
        if device.type == "cpu":
            return batch
        return super().transfer_batch_to_device(batch, device, dataloader_idx)

    def _done(self) -> bool:
        state = self.fit_state
        return (state.diverged or state.early_stopped or state.pruned
                or state.step >= self.end_step)

    def training_step(self, batch: tuple[torch.Tensor, ...], batch_idx: int) -> None:
        # One Lightning call brings several batches (see ``training_loader``); each is a step.
        x, y, mask = batch
        for row in range(0, x.shape[0], self.batch_size):
            if self._done():
                break
            rows = slice(row, row + self.batch_size)
            self._train_batch(x[rows], y[rows], mask[rows])
        if self._done():
            self.trainer.should_stop = True

    def _train_batch(self, x: torch.Tensor, y: torch.Tensor, mask: torch.Tensor) -> None:
        """One batch: an optimiser step per TBPTT chunk (one without TBPTT)."""
        state = self.fit_state
        # The raw optimiser: Lightning's wrapper adds hooks and profiler scopes per step that
        # this engine does not use (it counts steps and stops by itself).
        optimizer = self.configure_optimizers()
        teacher_forcing = self.plan.probability(state.step) if self.feeds_back else None
        carried = None
        for start, stop in chunk_spans(x.shape[1], self.tbptt_chunk):
            extra = {}
            if self.feeds_back:
                extra = {"targets": y[:, start:stop], "teacher_forcing": teacher_forcing}
            if carried is None:
                prediction, carried = self.model(x[:, start:stop], **extra)
            else:
                prediction, carried = self.model(x[:, start:stop], carried, **extra)
            loss = masked_loss(self.kind, prediction, y[:, start:stop], mask[:, start:stop])
            optimizer.zero_grad(set_to_none=True)
            if self.distributed:
                self.manual_backward(loss)  # DDP's gradient sync is prepared there
            else:
                loss.backward()
            loss_value = float(loss.detach())
            if not self._clip_and_check(loss_value):
                return
            optimizer.step()
            carried = detach_state(carried)
            state.step += 1
            state.loss_sum += loss_value
            state.loss_count += 1
            if state.step % self.val_every == 0 or state.step >= self.end_step:
                self.validate()
            if self._done():
                return

    def _clip_and_check(self, loss: float) -> bool:
        """Clip, count clipping, and mark divergence; True when the step may be applied."""
        limit = math.inf if self.grad_clip_norm is None else self.grad_clip_norm
        norm = float(torch.nn.utils.clip_grad_norm_(self.model.parameters(), limit))
        # Under DDP the norm is of all-reduced gradients, so every rank decides alike; a rank's
        # own loss is checked only when there is no other rank to fall out of step with.
        finite = math.isfinite(norm) and (self.distributed or math.isfinite(loss))
        if not finite:
            step = self.fit_state.step + 1
            self.fit_state.diverged_at = step
            self.fit_state.reason = f"non-finite loss or gradient at step {step}"
            return False
        if norm > limit:
            self.fit_state.clipped_steps += 1
        return True

    def validate(self) -> None:
        """Score the validation split, extend the curves, keep the best weights, count patience."""
        state = self.fit_state
        begin = time.perf_counter()
        try:
            value = self.scorer.score(self.model)[self.select_group][self.primary]
        except NonFinitePrediction:
            value = math.nan
        state.val_seconds += time.perf_counter() - begin
        train_loss = state.loss_sum / state.loss_count if state.loss_count else math.nan
        state.loss_sum, state.loss_count = 0.0, 0
        state.curve_steps.append(state.step)
        state.curve_train.append(train_loss)
        state.curve_val.append(value)
        if not math.isfinite(value):
            state.diverged_at = state.step
            state.reason = f"non-finite validation {self.primary} at step {state.step}"
            return
        self.log("val", value, prog_bar=True, on_step=True, on_epoch=False)
        if better(value, state.best_val, self.goal):
            state.best_val, state.best_step = value, state.step
            state.best_weights = copy.deepcopy(self.model.state_dict())
            state.stale_validations = 0
        else:
            state.stale_validations += 1
            if self.patience is not None and state.stale_validations >= self.patience:
                state.early_stopped = True
        if self.on_validation is not None and self.on_validation(state.step, value):
            state.pruned = True

    def on_fit_end(self) -> None:
        # ddp_spawn ships only the weights back to the launching process; the fit state and the
        # optimiser's moments travel through a file written by rank 0.
        if self.handoff is not None and self.trainer.world_size > 1 and self.trainer.is_global_zero:
            # Plain containers only, so the launching process reads it with weights_only=True.
            torch.save(
                {"fit_state": asdict(self.fit_state), "optimizer": self.optimizer.state_dict()},
                self.handoff,
            )

    def take_handoff(self) -> None:
        """In the launching process: adopt the fit state a spawned rank 0 left behind."""
        if self.handoff is None or not self.handoff.exists():
            return
        carried = torch.load(self.handoff, weights_only=True)
        self.fit_state = FitState(**carried["fit_state"])
        self.configure_optimizers().load_state_dict(carried["optimizer"])
        self.handoff.unlink()
