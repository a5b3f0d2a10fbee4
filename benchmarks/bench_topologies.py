"""Speed of every topology against torch.nn.RNN + Linear, measured in the same process.

For each round, every candidate is timed once in turn (interleaved), so machine noise hits all
of them alike; the table reports medians over rounds and the median of the per-round ratios to
the reference. Train step = forward + MSE loss + backward; inference = forward under
torch.inference_mode. A second table compares the teacher-forced training step of
output-feedback with its free-running one at several sequence lengths.

    .venv/bin/python benchmarks/bench_topologies.py            # B=32, T=256, I=32, H=128, O=16
    .venv/bin/python benchmarks/bench_topologies.py --rounds 5 --lengths 64 256
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import torch
from torch import nn

import loopzoo

__all__ = ["main"]


class TorchRNNReference(nn.Module):
    """A reference row: torch.nn.RNN (tanh) with a Linear readout."""

    def __init__(self, input_size: int, output_size: int, hidden_size: int, layers: int) -> None:
        super().__init__()
        self.rnn = nn.RNN(input_size, hidden_size, num_layers=layers, batch_first=True)
        self.readout = nn.Linear(hidden_size, output_size)

    def forward(self, x: torch.Tensor, **_: object) -> tuple[torch.Tensor, torch.Tensor]:
        out, h = self.rnn(x)
        return self.readout(out), h


def _train_step(model: nn.Module, x: torch.Tensor, y: torch.Tensor, **kwargs) -> Callable[[], None]:
    def run() -> None:
        model.zero_grad(set_to_none=True)
        out, _ = model(x, **kwargs)
        nn.functional.mse_loss(out, y).backward()

    return run


def _inference(model: nn.Module, x: torch.Tensor) -> Callable[[], None]:
    def run() -> None:
        with torch.inference_mode():
            model(x)

    return run


def _interleaved(jobs: dict[str, Callable[[], None]], rounds: int) -> dict[str, list[float]]:
    for job in jobs.values():  # warm-up: allocator, lazy initialisation
        job()
    times: dict[str, list[float]] = {name: [] for name in jobs}
    for _ in range(rounds):
        for name, job in jobs.items():
            start = time.perf_counter()
            job()
            times[name].append(time.perf_counter() - start)
    return times


def _ratio(times: list[float], reference: list[float]) -> float:
    return statistics.median(t / r for t, r in zip(times, reference, strict=True))


def speed_table(batch: int, steps: int, inputs: int, hidden: int, outputs: int,
                rounds: int) -> str:
    """Markdown table: median train-step and inference times, and ratios to the reference.

    Each row is compared with torch.nn.RNN of the same depth: stacked (2 layers by default)
    with torch.nn.RNN(num_layers=2), every other row with the one-layer torch.nn.RNN.
    """
    torch.manual_seed(0)
    x, y = torch.randn(batch, steps, inputs), torch.randn(batch, steps, outputs)
    sizes = {"input_size": inputs, "output_size": outputs, "hidden_size": hidden}
    # row name -> (model, forward keyword arguments, reference row name)
    rows: dict[str, tuple[nn.Module, dict, str]] = {}
    for layers in (1, 2):
        name = f"torch.nn.RNN(num_layers={layers}) + Linear"
        rows[name] = (TorchRNNReference(inputs, outputs, hidden, layers), {}, name)
    for name in loopzoo.available():
        model = loopzoo.create(name, **sizes)
        layers = model.options.get("num_layers", 1) if name == "stacked" else 1
        reference = f"torch.nn.RNN(num_layers={layers}) + Linear"
        if model.feeds_back_output:
            rows[f"{name} (teacher forcing)"] = (
                model, {"targets": y, "teacher_forcing": 1.0}, reference
            )
            rows[f"{name} (free running)"] = (model, {"teacher_forcing": 0.0}, reference)
        else:
            rows[name] = (model, {}, reference)
    train = _interleaved({k: _train_step(m, x, y, **kw) for k, (m, kw, _) in rows.items()}, rounds)
    infer = _interleaved(
        {k: _inference(m, x) for k, (m, _, _) in rows.items() if "teacher forcing" not in k},
        rounds,
    )
    lines = [
        f"B={batch}, T={steps}, input {inputs}, hidden {hidden}, output {outputs}; "
        f"{rounds} interleaved rounds, {torch.get_num_threads()} thread(s)",
        "",
        "| row | reference | train step ms | train ratio | inference ms | inference ratio |",
        "| --- | --- | ---: | ---: | ---: | ---: |",
    ]
    for name, (_, _, reference) in rows.items():
        train_ms = 1e3 * statistics.median(train[name])
        cells = [name, reference, f"{train_ms:.2f}",
                 f"{_ratio(train[name], train[reference]):.2f}"]
        if name in infer:
            infer_ms = 1e3 * statistics.median(infer[name])
            cells += [f"{infer_ms:.2f}", f"{_ratio(infer[name], infer[reference]):.2f}"]
        else:
            cells += ["(training only)", ""]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def teacher_forcing_table(batch: int, lengths: list[int], inputs: int, hidden: int,
                          outputs: int, rounds: int) -> str:
    """Markdown table: free-running over teacher-forced train-step time of output-feedback."""
    model = loopzoo.create("output-feedback", input_size=inputs, output_size=outputs,
                           hidden_size=hidden)
    lines = [
        "| T | teacher forcing ms | free running ms | free running / teacher forcing |",
        "| ---: | ---: | ---: | ---: |",
    ]
    for steps in lengths:
        x, y = torch.randn(batch, steps, inputs), torch.randn(batch, steps, outputs)
        times = _interleaved(
            {
                "forced": _train_step(model, x, y, targets=y, teacher_forcing=1.0),
                "free": _train_step(model, x, y, teacher_forcing=0.0),
            },
            rounds,
        )
        forced, free = statistics.median(times["forced"]), statistics.median(times["free"])
        lines.append(
            f"| {steps} | {1e3 * forced:.2f} | {1e3 * free:.2f} | "
            f"{_ratio(times['free'], times['forced']):.1f} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--batch", type=int, default=32)
    parser.add_argument("--steps", type=int, default=256)
    parser.add_argument("--inputs", type=int, default=32)
    parser.add_argument("--hidden", type=int, default=128)
    parser.add_argument("--outputs", type=int, default=16)
    parser.add_argument("--rounds", type=int, default=15)
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--lengths", type=int, nargs="+", default=[64, 256, 1024])
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    print(speed_table(args.batch, args.steps, args.inputs, args.hidden, args.outputs,
                      args.rounds))
    print()
    print(teacher_forcing_table(args.batch, args.lengths, args.inputs, args.hidden,
                                args.outputs, args.rounds))


if __name__ == "__main__":
    main()
