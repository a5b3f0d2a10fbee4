"""Harness overhead: training epochs through the Lightning harness against a bare torch loop.

Both sides train the same topology (same initial weights) on the same batches of the same task
split with the same optimiser, loss (``masked_loss``) and gradient clipping. The bare loop reads a
plain one-batch-per-item loader; the harness builds its Trainer and runs ``fit`` (validation
pushed past the end), so its time includes Trainer set-up. Two lengths of run are timed: one
epoch (set-up weighs most) and ``--epochs`` epochs, reported per epoch (steady training). Rounds
are interleaved (bare, harness, bare, ...); the table gives medians and the median of per-round
ratios harness / bare, for wall time and for the process's CPU time (which other processes on a
shared machine do not inflate).

    .venv/bin/python benchmarks/bench_harness.py                  # hidden-feedback and lstm
    .venv/bin/python benchmarks/bench_harness.py --rounds 9 --topologies gru --length 64
"""

from __future__ import annotations

import argparse
import copy
import functools
import statistics
import tempfile
import time
from pathlib import Path

import torch

import loopzoo
from loopzoo.engine.data import training_loader
from loopzoo.engine.evaluation import SplitScorer
from loopzoo.engine.lightning_setup import fit_quietly
from loopzoo.engine.module import SequenceModule
from loopzoo.engine.objectives import masked_loss
from loopzoo.engine.schedules import TeacherForcingPlan

__all__ = ["main"]

LR, CLIP = 3e-3, 1.0


def _timed(job) -> tuple[float, float]:
    """(wall seconds, process CPU seconds) of ``job()``."""
    wall, cpu = time.perf_counter(), time.process_time()
    job()
    return time.perf_counter() - wall, time.process_time() - cpu


def _bare(model: torch.nn.Module, loader, epochs: int) -> None:
    optimizer = torch.optim.Adam(model.parameters(), lr=LR)
    for _ in range(epochs):
        for x, y, mask in loader:
            prediction, _ = model(x)
            loss = masked_loss("regression", prediction, y, mask)
            optimizer.zero_grad(set_to_none=True)
            loss.backward()
            torch.nn.utils.clip_grad_norm_(model.parameters(), CLIP)
            optimizer.step()


def _harness(model: torch.nn.Module, task, loader, batch: int, epochs: int,
             run_dir: Path) -> None:
    steps = epochs * (len(loader.sampler) // batch)
    module = SequenceModule(
        model, task, SplitScorer(task, task.split("val"), feeds_back=False), batch_size=batch,
        optimizer=functools.partial(torch.optim.Adam, lr=LR), grad_clip_norm=CLIP,
        plan=TeacherForcingPlan("teacher_forcing"), tbptt_chunk=None, val_every=steps + 1,
        primary=task.metric, goal=task.goal, select_group="plain",
    )
    module.phase(end_step=steps, patience=None)
    fit_quietly(module, loader, {"enable_progress_bar": False}, run_dir=run_dir)
    if module.fit_state.step != steps:
        raise RuntimeError(f"the harness trained {module.fit_state.step} of {steps} steps")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--topologies", nargs="+", default=["hidden-feedback", "lstm"])
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--batch", type=int, default=32)
    parser.add_argument("--batches", type=int, default=64, help="batches per epoch")
    parser.add_argument("--length", type=int, default=64)
    parser.add_argument("--hidden", type=int, default=64)
    parser.add_argument("--epochs", type=int, default=5, help="epochs of the longer run")
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    task = loopzoo.tasks.create("adding", seed=0, length=args.length,
                                train_size=args.batch * args.batches, val_size=16, test_size=16)
    print(f"adding task T={args.length}, B={args.batch}, {args.batches} batches per epoch, "
          f"H={args.hidden}, torch threads {args.threads}, {args.rounds} interleaved rounds")
    print("| topology | run | bare s/epoch | harness s/epoch | wall ratio | CPU ratio |")
    print("| --- | --- | ---: | ---: | ---: | ---: |")
    with tempfile.TemporaryDirectory() as scratch:
        for name in args.topologies:
            torch.manual_seed(0)
            initial = loopzoo.create(name, input_size=task.input_size,
                                     output_size=task.output_size, hidden_size=args.hidden)
            for epochs in (1, args.epochs):
                bare, harness = [], []
                for round_ in range(args.rounds + 1):  # round 0 warms both paths up
                    plain = training_loader(task.split("train"), args.batch, seed=round_,
                                            batches_per_fetch=1)
                    b = _timed(functools.partial(_bare, copy.deepcopy(initial), plain, epochs))
                    fetched = training_loader(task.split("train"), args.batch, seed=round_)
                    h = _timed(functools.partial(_harness, copy.deepcopy(initial), task, fetched,
                                                 args.batch, epochs, Path(scratch)))
                    if round_:
                        bare.append(b)
                        harness.append(h)
                wall = statistics.median(h[0] / b[0] for h, b in zip(harness, bare, strict=True))
                cpu = statistics.median(h[1] / b[1] for h, b in zip(harness, bare, strict=True))
                label = "1 epoch, incl. set-up" if epochs == 1 else f"{epochs} epochs"
                print(f"| {name} | {label} | {statistics.median(b[0] for b in bare) / epochs:.3f} "
                      f"| {statistics.median(h[0] for h in harness) / epochs:.3f} | {wall:.3f} "
                      f"| {cpu:.3f} |")


if __name__ == "__main__":
    main()
