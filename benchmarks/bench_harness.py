"""Harness overhead: one training epoch through the Lightning harness against a bare torch loop.

Both sides train the same topology (same initial weights) on the same batches of the same task
split with the same optimiser, loss (``masked_loss``) and gradient clipping; the harness side
builds its Trainer and runs ``fit`` for one epoch (validation pushed past the epoch), so its time
includes Trainer set-up. Rounds are interleaved (bare, harness, bare, ...) and the table reports
medians and the median of the per-round ratios harness / bare.

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
from loopzoo.harness.data import training_loader
from loopzoo.harness.evaluation import SplitScorer
from loopzoo.harness.lightning_setup import fit_quietly
from loopzoo.harness.module import SequenceModule
from loopzoo.harness.objectives import masked_loss
from loopzoo.harness.schedules import TeacherForcingPlan

__all__ = ["main"]


def _bare_epoch(model: torch.nn.Module, loader, lr: float, clip: float) -> float:
    optimizer = torch.optim.Adam(model.parameters(), lr=lr)
    begin = time.perf_counter()
    for x, y, mask in loader:
        prediction, _ = model(x)
        loss = masked_loss("regression", prediction, y, mask)
        optimizer.zero_grad(set_to_none=True)
        loss.backward()
        torch.nn.utils.clip_grad_norm_(model.parameters(), clip)
        optimizer.step()
    return time.perf_counter() - begin


def _harness_epoch(model: torch.nn.Module, task, loader, lr: float, clip: float,
                   run_dir: Path) -> float:
    steps = len(loader)
    module = SequenceModule(
        model, task, SplitScorer(task, task.split("val"), feeds_back=False),
        optimizer=functools.partial(torch.optim.Adam, lr=lr), grad_clip_norm=clip,
        plan=TeacherForcingPlan("teacher_forcing"), tbptt_chunk=None, val_every=steps + 1,
        primary=task.metric, goal=task.goal, select_group="plain",
    )
    module.phase(end_step=steps, patience=None)
    seconds = fit_quietly(module, loader, {"enable_progress_bar": False}, run_dir=run_dir)
    assert module.fit_state.step == steps, "the harness must train the whole epoch"
    return seconds


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--topologies", nargs="+", default=["hidden-feedback", "lstm"])
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--batch", type=int, default=32)
    parser.add_argument("--batches", type=int, default=64, help="batches per epoch")
    parser.add_argument("--length", type=int, default=64)
    parser.add_argument("--hidden", type=int, default=64)
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    task = loopzoo.tasks.create("adding", seed=0, length=args.length,
                                train_size=args.batch * args.batches, val_size=16, test_size=16)
    print(f"adding task T={args.length}, B={args.batch}, {args.batches} batches per epoch, "
          f"H={args.hidden}, torch threads {args.threads}, {args.rounds} interleaved rounds")
    print("| topology | bare epoch (s) | harness epoch (s) | harness / bare (median of rounds) |")
    print("| --- | ---: | ---: | ---: |")
    with tempfile.TemporaryDirectory() as scratch:
        for name in args.topologies:
            torch.manual_seed(0)
            initial = loopzoo.create(name, input_size=task.input_size,
                                     output_size=task.output_size, hidden_size=args.hidden)
            bare, harness = [], []
            for round_ in range(args.rounds + 1):  # round 0 warms both paths up
                loader = training_loader(task.split("train"), args.batch, seed=round_)
                b = _bare_epoch(copy.deepcopy(initial), loader, 3e-3, 1.0)
                loader = training_loader(task.split("train"), args.batch, seed=round_)
                h = _harness_epoch(copy.deepcopy(initial), task, loader, 3e-3, 1.0,
                                   Path(scratch))
                if round_:
                    bare.append(b)
                    harness.append(h)
            ratio = statistics.median(h / b for h, b in zip(harness, bare, strict=True))
            print(f"| {name} | {statistics.median(bare):.3f} | {statistics.median(harness):.3f} "
                  f"| {ratio:.3f} |")


if __name__ == "__main__":
    main()
