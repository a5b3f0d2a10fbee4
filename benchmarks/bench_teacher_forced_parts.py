"""Where output feedback's teacher-forced train step spends its time, beside its arithmetic alone.

At equal parameter counts (widths from loopzoo.width_for_budget, input 32, output 16) this times,
interleaved in one process on one torch thread: hidden-feedback's BPTT train step, output
feedback's teacher-forced train step, and each operation of the teacher-forced layer on its own
whole (B*T, H) tensors with no Python around it: the five matrix products of the forward and
backward pass and the three passes over (B*T, H) (activation, its derivative, the bias
gradient), with each product's rate in GFLOP/s beside a square 1024 product's for scale. The
sum of those operations is what the layer's arithmetic costs on whole tensors; sum / BPTT shows
how far the step's arithmetic alone is from a ratio bar (at large widths the row-blocked layer
runs below that sum, its blocks staying in cache).

    .venv/bin/python benchmarks/bench_teacher_forced_parts.py
    .venv/bin/python benchmarks/bench_teacher_forced_parts.py --shape 32x256 --rounds 9
"""

from __future__ import annotations

import argparse
import statistics
from collections.abc import Callable

import torch
from bench_topologies import Row, _interleaved

import loopzoo
from loopzoo.topologies._teacher_forced import _activate_, _through_activation_

__all__ = ["main"]

_INPUTS, _OUTPUTS = 32, 16


def _square_rate(rounds: int) -> float:
    """GFLOP/s of a 1024 x 1024 by 1024 x 1024 product on one thread."""
    a, b, out = torch.randn(1024, 1024), torch.randn(1024, 1024), torch.empty(1024, 1024)
    times = _interleaved({"square": lambda: torch.mm(a, b, out=out)}, rounds)["square"]
    return 2.0 * 1024**3 / statistics.median(times) / 1e9


def _layer_parts(rows: int, hidden: int) -> dict[str, tuple[Callable[[], object], float]]:
    """Each operation of the teacher-forced layer on whole (rows, hidden) tensors, with its
    floating-point operations (0 for the passes that are not matrix products)."""
    features = _INPUTS + _OUTPUTS  # inputs beside the fed-back targets
    x = torch.randn(rows, features)
    weight, bias = torch.randn(hidden, features) * 0.1, torch.zeros(hidden)
    readout_w, readout_b = torch.randn(_OUTPUTS, hidden) * 0.03, torch.zeros(_OUTPUTS)
    h, grad_a = torch.empty(rows, hidden), torch.empty(rows, hidden)
    y, grad_y = torch.empty(rows, _OUTPUTS), torch.randn(rows, _OUTPUTS)
    grad_w, grad_readout_w, grad_b = (torch.zeros_like(t) for t in (weight, readout_w, bias))
    torch.addmm(bias, x, weight.t(), out=h)
    _activate_(h, False)
    wide, narrow = 2.0 * rows * features * hidden, 2.0 * rows * hidden * _OUTPUTS
    return {
        "x W^T + b": (lambda: torch.addmm(bias, x, weight.t(), out=h), wide),
        "tanh": (lambda: _activate_(h, False), 0.0),
        "h V^T + c": (lambda: torch.addmm(readout_b, h, readout_w.t(), out=y), narrow),
        "dy V": (lambda: torch.mm(grad_y, readout_w, out=grad_a), narrow),
        "dV += dy^T h": (lambda: grad_readout_w.addmm_(grad_y.t(), h), narrow),
        "tanh'": (lambda: _through_activation_(grad_a, h, False), 0.0),
        "dW += da^T x": (lambda: grad_w.addmm_(grad_a.t(), x), wide),
        "db += sum da": (lambda: grad_b.add_(grad_a.sum(0)), 0.0),
    }


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shape", default="1x2048", help="BxT, e.g. 32x256")
    parser.add_argument("--budgets", type=int, nargs="+", default=[5_000, 20_000, 100_000])
    parser.add_argument("--rounds", type=int, default=7)
    args = parser.parse_args(argv)
    batch, steps = (int(v) for v in args.shape.lower().split("x"))
    torch.set_num_threads(1)
    torch.manual_seed(0)
    x, y = torch.randn(batch, steps, _INPUTS), torch.randn(batch, steps, _OUTPUTS)
    print(f"B={batch}, T={steps}, input {_INPUTS}, output {_OUTPUTS}; medians of "
          f"{args.rounds} interleaved rounds, ms; a square 1024 product runs at "
          f"{_square_rate(args.rounds):.0f} GFLOP/s")
    for budget in args.budgets:
        models = {name: loopzoo.create(
            name, input_size=_INPUTS, output_size=_OUTPUTS,
            hidden_size=loopzoo.width_for_budget(name, params=budget, input_size=_INPUTS,
                                                 output_size=_OUTPUTS))
            for name in ("hidden-feedback", "output-feedback")}
        parts = _layer_parts(batch * steps, models["output-feedback"].hidden_size)
        jobs = {"BPTT step": Row(models["hidden-feedback"], 1).train_step(x, y),
                "teacher-forced step": Row(models["output-feedback"], 1, targets=y,
                                           teacher_forcing=1.0).train_step(x, y),
                **{name: run for name, (run, _) in parts.items()}}
        times = {name: statistics.median(t) * 1e3
                 for name, t in _interleaved(jobs, args.rounds).items()}
        arithmetic = sum(times[name] for name in parts)
        bptt, forced = times["BPTT step"], times["teacher-forced step"]
        print(f"\n{budget:,} parameters, hidden {models['hidden-feedback'].hidden_size} / "
              f"{models['output-feedback'].hidden_size}")
        for name, (_, flops) in parts.items():
            rate = f"  {flops / times[name] / 1e6:5.0f} GFLOP/s" if flops else ""
            print(f"  {name:<14} {times[name]:8.2f}{rate}")
        print(f"  {'sum':<14} {arithmetic:8.2f}  sum / BPTT {arithmetic / bptt:.2f}")
        print(f"  {'teacher-forced':<14} {forced:8.2f}  teacher-forced / BPTT {forced / bptt:.2f}")
        print(f"  {'BPTT':<14} {bptt:8.2f}")


if __name__ == "__main__":
    main()
