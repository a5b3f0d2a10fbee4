"""A whole training step with the engine's Adam (torch's fused CPU kernel) against torch's
default Adam on CPU (one update per parameter tensor), at the quick suite's sizes.

Each topology is built at the adding task's quick-suite budget (2000 parameters, input 2,
output 1) and trained on batches of 32 sequences of length 20: forward, MSE, backward, gradient
clipping, optimiser step. Both optimisers step copies of the same model, interleaved in one
process, one torch thread; the table gives the median over rounds of each round's mean step
time, and their ratio.

    .venv/bin/python benchmarks/bench_optimizer_step.py
    .venv/bin/python benchmarks/bench_optimizer_step.py --rounds 9 --models gru lstm
"""

from __future__ import annotations

import argparse
import copy
import statistics
import time
from collections.abc import Callable

import torch

import loopzoo
from loopzoo.engine.optimizers import optimizer_factory

__all__ = ["main"]


def _step(model: torch.nn.Module, optimizer: torch.optim.Optimizer, x: torch.Tensor,
          y: torch.Tensor) -> Callable[[], None]:
    def run() -> None:
        prediction, _ = model(x)
        loss = torch.nn.functional.mse_loss(prediction, y)
        optimizer.zero_grad(set_to_none=True)
        loss.backward()
        torch.nn.utils.clip_grad_norm_(model.parameters(), 1.0)
        optimizer.step()

    return run


def _mean_seconds(run: Callable[[], None], steps: int) -> float:
    start = time.perf_counter()
    for _ in range(steps):
        run()
    return (time.perf_counter() - start) / steps


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", nargs="+", default=loopzoo.available())
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--steps", type=int, default=200, help="steps per timed round")
    args = parser.parse_args(argv)
    torch.set_num_threads(1)
    torch.manual_seed(0)
    x, y = torch.randn(32, 20, 2), torch.randn(32, 20, 1)
    print("| topology | default Adam ms/step | engine Adam (fused) ms/step | ratio |")
    print("| --- | ---: | ---: | ---: |")
    for name in args.models:
        hidden = loopzoo.width_for_budget(name, params=2000, input_size=2, output_size=1)
        model = loopzoo.create(name, input_size=2, output_size=1, hidden_size=hidden)
        twin = copy.deepcopy(model)
        engine = optimizer_factory("adam", lr=1e-3, weight_decay=0.0, extra={})
        runs = {"default": _step(model, torch.optim.Adam(model.parameters(), lr=1e-3), x, y),
                "engine": _step(twin, engine(twin.parameters()), x, y)}
        times: dict[str, list[float]] = {key: [] for key in runs}
        for run in runs.values():  # warm-up: compiled loops, allocator
            _mean_seconds(run, 20)
        for _ in range(args.rounds):
            for key, run in runs.items():
                times[key].append(_mean_seconds(run, args.steps))
        default, fused = (statistics.median(times[k]) for k in ("default", "engine"))
        print(f"| {name} | {1e3 * default:.2f} | {1e3 * fused:.2f} | {fused / default:.2f} |")


if __name__ == "__main__":
    main()
