"""Progress of one fit: a live tqdm bar on a terminal, a few plain lines otherwise.

``FitProgress`` is the Lightning callback that reads the module's ``FitState`` and feeds a
``ProgressView``: ``ConsoleProgress`` here, or any object with the same three methods (the
harness's sweep jobs write theirs to a file). Lightning's own per-epoch bar is never used.
"""

from __future__ import annotations

import math
import os
import sys
import time
from dataclasses import dataclass
from typing import Any, Protocol, TextIO

import lightning as L

__all__ = ["ConsoleProgress", "FitProgress", "ProgressView", "Snapshot", "live_bar"]

# Least seconds between two updates of a view between validations (a validation always updates).
_TICK = 0.5


def live_bar(stream: TextIO, *, total: int, desc: str, bar_format: str, postfix: str = "") -> Any:
    """A tqdm bar on the terminal ``stream`` that goes away when closed; it follows the
    terminal's size, or assumes 80 x 24 where the terminal reports none (some ptys)."""
    from tqdm import tqdm

    try:
        size = os.get_terminal_size(stream.fileno())
        sized = size.columns > 0 and size.lines > 0
    except (OSError, ValueError):
        sized = False
    shape = {"dynamic_ncols": True} if sized else {"ncols": 80, "nrows": 24}
    return tqdm(total=total, desc=desc, file=stream, leave=False, mininterval=_TICK,
                bar_format=bar_format, postfix=postfix or None, **shape)


def _number(value: float | None, width: int = 0) -> str:
    return f"{'-' if value is None else f'{value:.4g}':<{width}}"


@dataclass(frozen=True)
class Snapshot:
    """Where a fit stands: ``loss`` is the mean training loss since the last validation (the
    last interval's right after one), ``val`` the last validation value and ``best`` the best,
    of metric ``metric``; ``seconds`` since the fit started."""

    step: int
    max_steps: int
    loss: float | None
    val: float | None
    best: float | None
    metric: str
    seconds: float

    def fields(self) -> str:
        """``step 120/600, loss 0.0123, val mse 0.0456 (best 0.0401)``."""
        return f"step {self.step}/{self.max_steps}, {self.values()}"

    def values(self, width: int = 0) -> str:
        """``loss 0.0123, val mse 0.0456 (best 0.0401)``, numbers padded to ``width``."""
        return (f"loss {_number(self.loss, width)}, val {self.metric} {_number(self.val, width)} "
                f"(best {_number(self.best)})")


class ProgressView(Protocol):
    """Shows one fit: ``start`` once, ``update`` often (``validated``: a validation was just
    scored), ``finish`` once with how the fit stopped (early_stop, step_cap, diverged, pruned)."""

    def start(self, snapshot: Snapshot) -> None: ...

    def update(self, snapshot: Snapshot, *, validated: bool) -> None: ...

    def finish(self, snapshot: Snapshot, stopped: str) -> None: ...


class ConsoleProgress:
    """One live bar (tqdm) on a terminal; otherwise a start line, a line at a validation at most
    every ``every`` seconds, and an end line. ``announce=False`` leaves out the start and end
    lines (a tuning trial's caller prints its own). ``stream`` defaults to ``sys.stdout`` as it
    is when the fit starts."""

    def __init__(self, label: str, *, announce: bool = True, every: float = 20.0,
                 stream: TextIO | None = None) -> None:
        self.label = label
        self.announce = announce
        self.every = every
        self.stream = stream
        self._out: TextIO | None = None
        self._bar: Any = None
        self._last = 0.0

    def _print(self, text: str) -> None:
        print(text, file=self._out, flush=True)

    def start(self, snapshot: Snapshot) -> None:
        self._out = self.stream or sys.stdout
        self._last = time.monotonic()
        if self._out.isatty():
            digits = len(str(snapshot.max_steps))
            self._bar = live_bar(self._out, total=snapshot.max_steps, desc=self.label,
                                 bar_format=f"{{desc}} {{n:>{digits}}}/{{total}} |{{bar}}| "
                                 "{elapsed}{postfix}", postfix=snapshot.values(width=9))
        elif self.announce:
            self._print(f"{self.label}: training, at most {snapshot.max_steps} steps")

    def update(self, snapshot: Snapshot, *, validated: bool) -> None:
        if self._bar is not None:
            # Fixed-width numbers keep the bar from changing length as they change.
            self._bar.set_postfix_str(snapshot.values(width=9), refresh=False)
            self._bar.update(snapshot.step - self._bar.n)
        elif validated and time.monotonic() - self._last >= self.every:
            self._last = time.monotonic()
            self._print(f"{self.label}: {snapshot.fields()}, {snapshot.seconds:.0f} s")

    def finish(self, snapshot: Snapshot, stopped: str) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None
        if self.announce:
            self._print(f"{self.label}: {stopped}, {snapshot.fields()}, "
                        f"{snapshot.seconds:.1f} s")


class FitProgress(L.Callback):
    """Feeds ``view`` from a ``SequenceModule``'s fit state, on the global rank 0 only.

    Example::

        fit_quietly(module, loader, {}, run_dir=path,
                    callbacks=[FitProgress(ConsoleProgress("gru adding"))])
    """

    def __init__(self, view: ProgressView) -> None:
        self.view = view
        self._active = False
        self._begin = 0.0
        self._last = 0.0
        self._validations = 0

    def _snapshot(self, module: Any) -> Snapshot:
        state = module.fit_state
        if state.loss_count:
            loss: float | None = state.loss_sum / state.loss_count
        else:
            loss = state.curve_train[-1] if state.curve_train else None
        val = state.curve_val[-1] if state.curve_val else None
        return Snapshot(
            step=state.step, max_steps=module.end_step,
            loss=loss if loss is not None and math.isfinite(loss) else None,
            val=val if val is not None and math.isfinite(val) else None,
            best=state.best_val, metric=module.primary,
            seconds=time.monotonic() - self._begin)

    def on_fit_start(self, trainer: L.Trainer, pl_module: L.LightningModule) -> None:
        self._active = trainer.is_global_zero
        if not self._active:
            return
        self._begin = self._last = time.monotonic()
        self._validations = len(pl_module.fit_state.curve_val)
        self.view.start(self._snapshot(pl_module))

    def on_train_batch_end(self, trainer: L.Trainer, pl_module: L.LightningModule, outputs: Any,
                           batch: Any, batch_idx: int) -> None:
        if not self._active:
            return
        validations = len(pl_module.fit_state.curve_val)
        now = time.monotonic()
        if validations != self._validations or now - self._last >= _TICK:
            self.view.update(self._snapshot(pl_module),
                             validated=validations != self._validations)
            self._validations, self._last = validations, now

    def on_fit_end(self, trainer: L.Trainer, pl_module: L.LightningModule) -> None:
        if self._active:
            self._active = False
            self.view.finish(self._snapshot(pl_module), pl_module.fit_state.stopped)

    def on_exception(self, trainer: L.Trainer, pl_module: L.LightningModule,
                     exception: BaseException) -> None:
        if self._active:
            self._active = False
            self.view.finish(self._snapshot(pl_module), f"stopped by {type(exception).__name__}")
