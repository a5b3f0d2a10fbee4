"""Single-stream step latency: each topology through StreamRunner and through onnxruntime, next
to torch.nn.RNNCell + Linear of the same sizes measured in the same process.

Repeats are interleaved (every candidate once per round, in turn), each timing a block of
consecutive steps; a candidate's ratio is the median over rounds of its time divided by the
reference's time in the same round. Run:

    .venv/bin/python benchmarks/bench_streaming.py [--hidden 64] [--rounds 15] [--steps 400]
        [--streams 64]

A second table compares ``push_many`` over many streams with one ``push`` per stream.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
from collections.abc import Callable

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
import torch  # noqa: E402

import loopzoo  # noqa: E402
from loopzoo.export import export_bytes  # noqa: E402
from loopzoo.serve.streaming import StreamRunner  # noqa: E402

INPUT_SIZE, OUTPUT_SIZE = 8, 4


def reference_step(hidden: int) -> Callable[[torch.Tensor], torch.Tensor]:
    """torch.nn.RNNCell + Linear: the hand-written Elman step a user would otherwise ship."""
    cell, readout = torch.nn.RNNCell(INPUT_SIZE, hidden), torch.nn.Linear(hidden, OUTPUT_SIZE)
    state = {"h": torch.zeros(1, hidden)}

    def step(x_t: torch.Tensor) -> torch.Tensor:
        with torch.inference_mode():
            state["h"] = cell(x_t.unsqueeze(0), state["h"])
            return readout(state["h"])[0]

    return step


def runner_step(model: torch.nn.Module) -> Callable[[torch.Tensor], torch.Tensor]:
    runner = StreamRunner(model)
    runner.start("bench")
    return lambda x_t: runner.push("bench", x_t)


def public_step(model: torch.nn.Module) -> Callable[[torch.Tensor], torch.Tensor]:
    """The module's public ``step`` (it re-checks shapes, dtypes and state on every call)."""
    state = {"s": model.init_state(1)}

    def step(x_t: torch.Tensor) -> torch.Tensor:
        with torch.inference_mode():
            y_t, state["s"] = model.step(x_t.unsqueeze(0), state["s"])
            return y_t[0]

    return step


def onnx_step(model: torch.nn.Module) -> Callable[[torch.Tensor], np.ndarray]:
    import onnxruntime

    options = onnxruntime.SessionOptions()
    options.intra_op_num_threads = 1
    options.inter_op_num_threads = 1
    options.log_severity_level = 3
    session = onnxruntime.InferenceSession(
        export_bytes(model, "step", "onnx"), options, providers=["CPUExecutionProvider"]
    )
    names = [i.name for i in session.get_inputs()]
    state = [t.numpy() for t in model.init_state(1)]

    def step(x_t: torch.Tensor) -> np.ndarray:
        feed = dict(zip(names, [x_t.numpy()[None], *state], strict=True))
        y_t, *next_state = session.run(None, feed)
        state[:] = next_state
        return y_t[0]

    return step


def time_block(step: Callable[[torch.Tensor], object], samples: torch.Tensor) -> float:
    start = time.perf_counter()
    for x_t in samples:
        step(x_t)
    return (time.perf_counter() - start) / len(samples)


def compare(
    candidates: dict[str, Callable[[torch.Tensor], object]],
    samples: torch.Tensor,
    rounds: int,
    per_call: int = 1,
) -> list[str]:
    """Markdown rows: median microseconds per sample and the median per-round ratio to the
    first candidate (the reference); every round runs every candidate once, in turn."""
    for step in candidates.values():  # warm-up: allocator, first-call paths
        time_block(step, samples[:50])
    seconds: dict[str, list[float]] = {name: [] for name in candidates}
    for _ in range(rounds):
        for name, step in candidates.items():
            seconds[name].append(time_block(step, samples) / per_call)
    reference = next(iter(seconds.values()))
    rows = []
    for name, times in seconds.items():
        ratio = statistics.median(t / r for t, r in zip(times, reference, strict=True))
        rows.append(f"| {name} | {statistics.median(times) * 1e6:.1f} | {ratio:.2f} |")
    return rows


def many_streams(model: torch.nn.Module, streams: int) -> dict[str, Callable]:
    """One push per stream against one ``push_many`` over all of them, on the same samples."""
    one_by_one, batched = StreamRunner(model), StreamRunner(model)
    for stream in range(streams):
        one_by_one.start(stream)
        batched.start(stream)

    def each(x_t: torch.Tensor) -> None:
        for stream in range(streams):
            one_by_one.push(stream, x_t[stream])

    def together(x_t: torch.Tensor) -> None:
        batched.push_many({stream: x_t[stream] for stream in range(streams)})

    return {"one push per stream (reference)": each, "push_many over all streams": together}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hidden", type=int, default=64)
    parser.add_argument("--rounds", type=int, default=15)
    parser.add_argument("--steps", type=int, default=400)
    parser.add_argument("--streams", type=int, default=64, help="for the many-streams table")
    args = parser.parse_args()
    torch.set_num_threads(1)
    torch.manual_seed(0)
    samples = torch.randn(args.steps, INPUT_SIZE)
    candidates: dict[str, Callable[[torch.Tensor], object]] = {
        "torch.nn.RNNCell + Linear (reference)": reference_step(args.hidden)
    }
    models = {}
    for name in loopzoo.available():
        models[name] = model = loopzoo.create(
            name, input_size=INPUT_SIZE, output_size=OUTPUT_SIZE, hidden_size=args.hidden
        ).eval()
        candidates[f"{name} via StreamRunner"] = runner_step(model)
        if name == "hidden-feedback":
            candidates[f"{name} via its public step, no runner"] = public_step(model)
        candidates[f"{name} via onnxruntime step graph"] = onnx_step(model)
    header = ["| path | median us per sample | ratio to reference (median over rounds) |",
              "| --- | ---: | ---: |"]
    print(f"single stream, B=1, input {INPUT_SIZE}, hidden {args.hidden}, output {OUTPUT_SIZE}, "
          f"1 thread, {args.rounds} interleaved rounds x {args.steps} steps, torch "
          f"{torch.__version__}")
    print()
    print("\n".join(header + compare(candidates, samples, args.rounds)))
    print()
    print(f"hidden-feedback, {args.streams} streams, one sample each per step, "
          f"{args.rounds} interleaved rounds x {args.steps // 4} steps")
    print()
    many = torch.randn(args.steps // 4, args.streams, INPUT_SIZE)
    rows = compare(many_streams(models["hidden-feedback"], args.streams), many, args.rounds,
                   per_call=args.streams)
    print("\n".join(header + rows))


if __name__ == "__main__":
    main()
