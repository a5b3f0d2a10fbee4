"""Train-step speed of every topology against torch.nn.LSTM and torch.nn.RNN, in one process.

For each round, every candidate is timed once in turn (interleaved), so machine noise hits all
of them alike; the tables report medians over rounds and the median of the per-round ratios to
a reference. Train step = forward + MSE loss + backward + Adam step; inference = forward under
torch.inference_mode. Every row is compared with the torch.nn layer of the same hidden size and
depth (layers, or transition layers for deep-transition).

The second table puts output feedback's teacher-forced step (no time loop) beside
hidden-feedback's BPTT step at equal parameter counts.

    .venv/bin/python benchmarks/bench_topologies.py     # shapes 1x2048x64 and 32x256x128
    .venv/bin/python benchmarks/bench_topologies.py --shapes 32x256x128 --plain --rounds 5
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable
from contextlib import nullcontext

import torch
from torch import nn

import loopzoo
from loopzoo.topologies import _kernels

__all__ = ["budget_table", "main", "speed_table"]

# The option that sets how many recurrent layers a topology runs per step.
DEPTH_OPTION = {"stacked": "num_layers", "residual-skip": "num_layers",
                "deep-transition": "transition_depth", "lstm": "num_layers", "gru": "num_layers"}


class TorchReference(nn.Module):
    """A reference row: torch.nn.LSTM or torch.nn.RNN (tanh) with a Linear readout."""

    def __init__(self, layer: type[nn.RNNBase], input_size: int, output_size: int,
                 hidden_size: int, layers: int) -> None:
        super().__init__()
        self.rnn = layer(input_size, hidden_size, num_layers=layers, batch_first=True)
        self.readout = nn.Linear(hidden_size, output_size)

    def forward(self, x: torch.Tensor, **_: object) -> tuple[torch.Tensor, object]:
        out, state = self.rnn(x)
        return self.readout(out), state


class Row:
    """One timed candidate: a model, its forward keywords, and whether it runs plain loops."""

    def __init__(self, model: nn.Module, depth: int, plain: bool = False, **kwargs) -> None:
        self.model, self.depth, self.plain, self.kwargs = model, depth, plain, kwargs
        self.optimizer = torch.optim.Adam(model.parameters(), lr=1e-4)

    def _context(self):
        return _kernels.forced(False) if self.plain else nullcontext()

    def train_step(self, x: torch.Tensor, y: torch.Tensor) -> Callable[[], None]:
        def run() -> None:
            with self._context():
                self.optimizer.zero_grad(set_to_none=True)
                out, _ = self.model(x, **self.kwargs)
                nn.functional.mse_loss(out, y).backward()
                self.optimizer.step()

        return run

    def inference(self, x: torch.Tensor) -> Callable[[], None]:
        def run() -> None:
            with self._context(), torch.inference_mode():
                self.model(x)

        return run


def _interleaved(jobs: dict[str, Callable[[], None]], rounds: int) -> dict[str, list[float]]:
    for job in jobs.values():  # warm-up: allocator, lazy initialisation, loop compilation
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


def _rows(inputs: int, outputs: int, hidden: int, plain: bool,
          targets: torch.Tensor) -> dict[str, Row]:
    sizes = {"input_size": inputs, "output_size": outputs, "hidden_size": hidden}
    rows: dict[str, Row] = {}
    for name in loopzoo.available():
        model = loopzoo.create(name, **sizes)
        depth = model.options.get(DEPTH_OPTION.get(name, ""), 1)
        variants = [("", {})]
        if model.feeds_back_output:
            variants = [(" (teacher forcing)", {"targets": targets, "teacher_forcing": 1.0}),
                        (" (scheduled sampling 0.5)", {"targets": targets, "teacher_forcing": 0.5}),
                        (" (free running)", {"teacher_forcing": 0.0})]
        for label, kwargs in variants:
            rows[name + label] = Row(model, depth, **kwargs)
            if plain and name not in ("lstm", "gru"):
                rows[f"{name}{label} (plain loops)"] = Row(model, depth, plain=True, **kwargs)
            elif plain and name == "gru":  # its plain path is torch.nn.GRU
                rows[f"{name} (plain: torch.nn.GRU)"] = Row(model, depth, plain=True, **kwargs)
    return rows


def speed_table(batch: int, steps: int, inputs: int, hidden: int, outputs: int, rounds: int,
                plain: bool = False) -> str:
    """Markdown table: median train-step and inference times and ratios to the references."""
    torch.manual_seed(0)
    x, y = torch.randn(batch, steps, inputs), torch.randn(batch, steps, outputs)
    rows = _rows(inputs, outputs, hidden, plain, y)
    depths = sorted({row.depth for row in rows.values()})
    references: dict[str, Row] = {}
    for depth in depths:
        for kind, layer in (("LSTM", nn.LSTM), ("RNN", nn.RNN)):
            references[f"torch.nn.{kind}({depth} layer{'s' * (depth > 1)})"] = Row(
                TorchReference(layer, inputs, outputs, hidden, depth), depth
            )
    everything = {**references, **rows}
    train = _interleaved({k: r.train_step(x, y) for k, r in everything.items()}, rounds)
    infer = _interleaved(
        {k: r.inference(x) for k, r in everything.items() if "teacher forcing" not in k
         and "scheduled" not in k}, rounds,
    )

    def reference(kind: str, depth: int) -> str:
        return f"torch.nn.{kind}({depth} layer{'s' * (depth > 1)})"

    lines = [
        f"B={batch}, T={steps}, input {inputs}, hidden {hidden}, output {outputs}; "
        f"{rounds} interleaved rounds, {torch.get_num_threads()} torch thread(s)",
        "",
        "| row | layers | train step ms | vs LSTM | vs RNN | inference ms | inference vs LSTM |",
        "| --- | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for name, row in everything.items():
        lstm, rnn = reference("LSTM", row.depth), reference("RNN", row.depth)
        cells = [name, str(row.depth), f"{1e3 * statistics.median(train[name]):.2f}",
                 f"{_ratio(train[name], train[lstm]):.2f}",
                 f"{_ratio(train[name], train[rnn]):.2f}"]
        if name in infer:
            cells += [f"{1e3 * statistics.median(infer[name]):.2f}",
                      f"{_ratio(infer[name], infer[lstm]):.2f}"]
        else:
            cells += ["(training only)", ""]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def budget_table(batch: int, steps: int, inputs: int, outputs: int, budgets: list[int],
                 rounds: int) -> str:
    """Markdown table: output feedback's teacher-forced train step against hidden-feedback's
    BPTT step at equal parameter counts (widths from loopzoo.width_for_budget)."""
    torch.manual_seed(0)
    x, y = torch.randn(batch, steps, inputs), torch.randn(batch, steps, outputs)
    lines = [
        f"B={batch}, T={steps}, input {inputs}, output {outputs}; {rounds} interleaved rounds",
        "",
        "| parameters | hidden (hidden-feedback / output-feedback) | hidden-feedback BPTT ms "
        "| output-feedback teacher forcing ms | teacher forcing / BPTT |",
        "| ---: | --- | ---: | ---: | ---: |",
    ]
    for budget in budgets:
        models = {}
        for name in ("hidden-feedback", "output-feedback"):
            width = loopzoo.width_for_budget(name, params=budget, input_size=inputs,
                                             output_size=outputs)
            models[name] = loopzoo.create(name, input_size=inputs, output_size=outputs,
                                          hidden_size=width)
        jobs = {
            "bptt": Row(models["hidden-feedback"], 1).train_step(x, y),
            "forced": Row(models["output-feedback"], 1, targets=y,
                          teacher_forcing=1.0).train_step(x, y),
        }
        times = _interleaved(jobs, rounds)
        widths = " / ".join(str(m.hidden_size) for m in models.values())
        lines.append(
            f"| {budget:,} | {widths} | {1e3 * statistics.median(times['bptt']):.2f} | "
            f"{1e3 * statistics.median(times['forced']):.2f} | "
            f"{_ratio(times['forced'], times['bptt']):.2f} |"
        )
    return "\n".join(lines)


def _shape(text: str) -> tuple[int, int, int]:
    batch, steps, hidden = (int(v) for v in text.lower().split("x"))
    return batch, steps, hidden


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shapes", type=_shape, nargs="+",
                        default=[(1, 2048, 64), (32, 256, 128)], help="BxTxH, e.g. 32x256x128")
    parser.add_argument("--inputs", type=int, default=8)
    parser.add_argument("--outputs", type=int, default=4)
    parser.add_argument("--rounds", type=int, default=11)
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--plain", action="store_true",
                        help="also time every zoo row on its plain PyTorch loops")
    parser.add_argument("--budgets", type=int, nargs="*", default=[5_000, 20_000, 100_000])
    parser.add_argument("--budget-shapes", type=str, nargs="*", default=["32x256", "1x2048"],
                        help="BxT for the equal-parameter table (input 32, output 16)")
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    for batch, steps, hidden in args.shapes:
        print(speed_table(batch, steps, args.inputs, hidden, args.outputs, args.rounds,
                          plain=args.plain))
        print()
    for shape in args.budget_shapes:
        batch, steps = (int(v) for v in shape.lower().split("x"))
        print(budget_table(batch, steps, 32, 16, args.budgets, args.rounds))
        print()


if __name__ == "__main__":
    main()
