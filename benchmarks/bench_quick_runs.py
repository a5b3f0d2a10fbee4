"""Training time of the quick suite's runs with compiled time loops against the plain loops.

For each (topology, task) of the ``quick`` suite (seed 0), runs ``loopzoo train suite=quick
model=M task=T seed=0`` twice in fresh processes, once with ``LOOPZOO_KERNELS=torch`` (the plain
PyTorch loops, the code paths before the compiled loops existed: torch.nn.GRU for gru) and once
with the compiled loops, alternating which goes first. Reports each run's recorded training time
(``cost.train_seconds``) and the process's CPU time (user + system, which other processes on a
shared machine inflate less than wall time), and the totals.

    .venv/bin/python benchmarks/bench_quick_runs.py
    .venv/bin/python benchmarks/bench_quick_runs.py --models gru lstm --tasks adding
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

__all__ = ["main"]

MODELS = ["hidden-feedback", "output-feedback", "stacked", "deep-transition", "residual-skip",
          "lstm", "gru"]
TASKS = ["adding", "reber", "sines", "digits"]


def _train(model: str, task: str, plain: bool, out: Path) -> tuple[float, float]:
    """(recorded train seconds, child CPU seconds) of one run in a fresh process."""
    env = dict(os.environ, LOOPZOO_KERNELS="torch" if plain else "numba")
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(
        [sys.executable, "-m", "loopzoo.cli", "train", "suite=quick", f"model={model}",
         f"task={task}", "seed=0", f"out={out}"],
        check=True, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    (record,) = [json.loads(p.read_text()) for p in (out / "records").glob(f"{task}-{model}-*")]
    return record["cost"]["train_seconds"], cpu


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", nargs="+", default=MODELS)
    parser.add_argument("--tasks", nargs="+", default=TASKS)
    args = parser.parse_args(argv)
    print("| task | model | plain train s | compiled train s | ratio | plain CPU s | "
          "compiled CPU s |")
    print("| --- | --- | ---: | ---: | ---: | ---: | ---: |")
    totals = [0.0, 0.0, 0.0, 0.0]
    order = 0
    for task in args.tasks:
        for model in args.models:
            results = {}
            for plain in ((True, False) if order % 2 == 0 else (False, True)):
                with tempfile.TemporaryDirectory(prefix="loopzoo-bench-") as folder:
                    results[plain] = _train(model, task, plain, Path(folder))
            order += 1
            (plain_s, plain_cpu), (fast_s, fast_cpu) = results[True], results[False]
            for index, value in enumerate((plain_s, fast_s, plain_cpu, fast_cpu)):
                totals[index] += value
            print(f"| {task} | {model} | {plain_s:.1f} | {fast_s:.1f} | {fast_s / plain_s:.2f} | "
                  f"{plain_cpu:.1f} | {fast_cpu:.1f} |", flush=True)
    print(f"| all | all | {totals[0]:.1f} | {totals[1]:.1f} | {totals[1] / totals[0]:.2f} | "
          f"{totals[2]:.1f} | {totals[3]:.1f} |")


if __name__ == "__main__":
    main()
