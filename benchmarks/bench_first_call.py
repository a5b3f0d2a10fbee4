"""First-call cost of the compiled time loops, as a fresh process (CI on a clean clone) pays it.

Every row runs in fresh child processes: import loopzoo, build the model, import numba and the
compiled-loop package, then time forward + MSE + backward on the same batch several times. The
first call compiles each loop it reaches (or loads it from numba's disk cache); the later calls
are the steady cost. Per row and dtype, a cold child gets ``NUMBA_CACHE_DIR`` set to a new empty
folder, then a warm child gets the same folder, now filled. A last pair of children runs every
row in both dtypes in one process, cold then warm: what one test session pays in total.

    .venv/bin/python benchmarks/bench_first_call.py
    .venv/bin/python benchmarks/bench_first_call.py --rows hidden-feedback gru --dtypes float64
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time

__all__ = ["main"]

BATCH, STEPS, INPUTS, HIDDEN, OUTPUTS = 4, 16, 8, 16, 4
CALLS = 6  # the first, then five steady calls
# Row name -> (topology, forward keywords as a tag): output feedback's three loops separately.
ROWS = {
    "hidden-feedback": ("hidden-feedback", ""),
    "output-feedback, teacher forcing": ("output-feedback", "teacher forcing"),
    "output-feedback, scheduled sampling 0.5": ("output-feedback", "scheduled sampling"),
    "output-feedback, free running": ("output-feedback", ""),
    "stacked": ("stacked", ""),
    "deep-transition": ("deep-transition", ""),
    "residual-skip": ("residual-skip", ""),
    "lstm (torch.nn.LSTM, no compiled loop)": ("lstm", ""),
    "gru": ("gru", ""),
}


def _child(rows: list[str], dtypes: list[str]) -> None:
    """Runs in the child: prints JSON {"numba import": s, "rows": {"row dtype": [s, ...]}}."""
    import torch

    import loopzoo

    torch.set_num_threads(1)
    start = time.perf_counter()
    import loopzoo.topologies._kernels._compile  # noqa: F401  (numba, SciPy's BLAS)

    result: dict[str, object] = {"numba import": time.perf_counter() - start}
    times: dict[str, list[float]] = {}
    for dtype_name in dtypes:
        dtype = getattr(torch, dtype_name)
        for row in rows:
            topology, mode = ROWS[row]
            torch.manual_seed(0)
            model = loopzoo.create(topology, input_size=INPUTS, output_size=OUTPUTS,
                                   hidden_size=HIDDEN).to(dtype)
            x = torch.randn(BATCH, STEPS, INPUTS, dtype=dtype)
            y = torch.randn(BATCH, STEPS, OUTPUTS, dtype=dtype)
            forcing = {"teacher forcing": 1.0, "scheduled sampling": 0.5}.get(mode)
            kwargs = {} if forcing is None else {"targets": y, "teacher_forcing": forcing}
            calls = []
            for _ in range(CALLS):
                start = time.perf_counter()
                out, _ = model(x, **kwargs)
                torch.nn.functional.mse_loss(out, y).backward()
                calls.append(time.perf_counter() - start)
            times[f"{row} {dtype_name}"] = calls
    result["rows"] = times
    print(json.dumps(result))


def _run(rows: list[str], dtypes: list[str], cache: str) -> dict:
    env = dict(os.environ, NUMBA_CACHE_DIR=cache, LOOPZOO_KERNELS="numba", OMP_NUM_THREADS="1")
    done = subprocess.run(
        [sys.executable, __file__, "--child", "--rows", *rows, "--dtypes", *dtypes],
        check=True, env=env, capture_output=True, text=True,
    )
    return json.loads(done.stdout.splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", nargs="+", default=list(ROWS), choices=list(ROWS),
                        metavar="ROW", help="rows to time (default: all)")
    parser.add_argument("--dtypes", nargs="+", default=["float32"],
                        choices=["float32", "float64"], help="dtypes of the per-row table")
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(args.rows, args.dtypes)
        return
    print(f"forward + MSE + backward, B={BATCH}, T={STEPS}, input {INPUTS}, hidden {HIDDEN}, "
          f"output {OUTPUTS}, 1 thread; steady = median of calls 2-{CALLS}\n")
    print("| row | dtype | cold cache: first call s | warm cache: first call s | steady call ms "
          "| cold first / steady | warm first / steady |")
    print("| --- | --- | ---: | ---: | ---: | ---: | ---: |")
    imports = []
    for dtype in args.dtypes:
        for row in args.rows:
            with tempfile.TemporaryDirectory(prefix="numba-cache-") as cache:
                cold, warm = (_run([row], [dtype], cache) for _ in range(2))
            imports += [cold["numba import"], warm["numba import"]]
            (cold_calls,), (warm_calls,) = cold["rows"].values(), warm["rows"].values()
            steady = statistics.median(cold_calls[1:] + warm_calls[1:])
            print(f"| {row} | {dtype} | {cold_calls[0]:.2f} | {warm_calls[0]:.2f} | "
                  f"{1e3 * steady:.1f} | {cold_calls[0] / steady:.0f} | "
                  f"{warm_calls[0] / steady:.0f} |")
    print(f"\nnumba + compiled-loop package import, per process (before the first call): median "
          f"{statistics.median(imports):.2f} s over {len(imports)} processes\n")
    every = ["float32", "float64"]
    with tempfile.TemporaryDirectory(prefix="numba-cache-") as cache:
        cold, warm = (_run(args.rows, every, cache) for _ in range(2))
    for label, result in (("cold", cold), ("warm", warm)):
        first = sum(calls[0] for calls in result["rows"].values())
        steady = sum(statistics.median(calls[1:]) for calls in result["rows"].values())
        print(f"one process, every row above in float32 and float64, {label} cache: first calls "
              f"{first:.1f} s in total (+ {result['numba import']:.1f} s numba import); the same "
              f"calls steady: {steady:.2f} s")


if __name__ == "__main__":
    main()
