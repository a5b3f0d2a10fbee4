"""A training step on one torch thread against one per core, at three model sizes.

A single `loopzoo train` (not a sweep) runs with one torch thread per core; a sweep gives each
of its parallel jobs cores / jobs threads. This measures what the extra threads buy per training
step (forward, MSE, backward, gradient clipping, the engine's Adam) for each topology at the
quick suite's size (2000 parameters, batch 32 x length 20, input 2, output 1), at 100k
parameters (batch 32 x length 256, input 32, output 16) and at 1M parameters (batch 32 x length
64, same widths). Both thread counts step the same model, interleaved in one process; the table
gives the median over rounds of each round's mean step time, and their ratio.

    .venv/bin/python benchmarks/bench_threads.py
    .venv/bin/python benchmarks/bench_threads.py --models hidden-feedback lstm --rounds 7
"""

from __future__ import annotations

import argparse
import statistics

import torch
from bench_optimizer_step import _mean_seconds, _step

import loopzoo
from loopzoo.engine.optimizers import optimizer_factory
from loopzoo.harness.config import cores

__all__ = ["main"]

# (parameters, input, output, batch, length, timed steps per round)
_SIZES = ((2_000, 2, 1, 32, 20, 50), (100_000, 32, 16, 32, 256, 3), (1_000_000, 32, 16, 32, 64, 3))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", nargs="+", default=loopzoo.available())
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args(argv)
    many = cores()
    if many < 2:
        parser.error("this process may use one core only; there is no second thread to compare")
    torch.manual_seed(0)
    print(f"| topology | parameters | B x T | 1 thread ms/step | {many} threads ms/step | ratio |")
    print("| --- | ---: | --- | ---: | ---: | ---: |")
    for params, inputs, outputs, batch, length, steps in _SIZES:
        x, y = torch.randn(batch, length, inputs), torch.randn(batch, length, outputs)
        for name in args.models:
            hidden = loopzoo.width_for_budget(name, params=params, input_size=inputs,
                                              output_size=outputs)
            model = loopzoo.create(name, input_size=inputs, output_size=outputs,
                                   hidden_size=hidden)
            engine = optimizer_factory("adam", lr=1e-3, weight_decay=0.0, extra={})
            run = _step(model, engine(model.parameters()), x, y)
            times: dict[int, list[float]] = {1: [], many: []}
            for threads in times:  # warm-up: compiled loops, allocator, thread pool
                torch.set_num_threads(threads)
                _mean_seconds(run, 2)
            for _ in range(args.rounds):
                for threads in times:
                    torch.set_num_threads(threads)
                    times[threads].append(_mean_seconds(run, steps))
            one, all_ = (statistics.median(times[k]) for k in (1, many))
            print(f"| {name} | {params:,} | {batch} x {length} | {1e3 * one:.2f} | "
                  f"{1e3 * all_:.2f} | {all_ / one:.2f} |", flush=True)


if __name__ == "__main__":
    main()
