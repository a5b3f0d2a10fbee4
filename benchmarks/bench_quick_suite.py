"""Time the ``quick`` suite end to end and state its long-lag verdict.

    python benchmarks/bench_quick_suite.py [OUT]

Runs ``loopzoo sweep suite=quick out=OUT`` in a subprocess (OUT must be new or hold an earlier
run of this suite: recorded runs are skipped, so use a fresh folder for a timing) and prints the
wall time, the CPU time of the sweep and its workers, the load average before and after (the
machine is shared: wall time under load says little, CPU time / cores bounds it on an idle
machine), and the adding-task test MSE per topology (mean over seeds), which should show the
gated rows (lstm, gru) below plain tanh (hidden-feedback): Hochreiter & Schmidhuber 1997;
Le, Jaitly & Hinton 2015.
"""

from __future__ import annotations

import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from loopzoo.harness.config import cores
from loopzoo.harness.records import load_records


def main(argv: list[str]) -> int:
    out = Path(argv[0]) if argv else Path(tempfile.mkdtemp(prefix="loopzoo-quick-"))
    load_before = os.getloadavg()
    tick = time.perf_counter()
    subprocess.run([sys.executable, "-m", "loopzoo.cli", "sweep", "suite=quick", f"out={out}"],
                   check=True)
    wall = time.perf_counter() - tick
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = usage.ru_utime + usage.ru_stime
    load_after = os.getloadavg()
    runs = [r for r in load_records(out) if r["kind"] == "model"]
    print(f"out: {out}")
    print(f"runs: {len(runs)} ({sum(r['status'] == 'ok' for r in runs)} ok)")
    print(f"wall: {wall:.0f} s; CPU (sweep + workers): {cpu:.0f} s; cores: {cores()}; "
          f"CPU / cores: {cpu / cores():.0f} s")
    print(f"load average (1, 5, 15 min) before: {load_before}, after: {load_after}")
    print("adding, test MSE by topology (mean over seeds):")
    by_model: dict[str, list[float]] = {}
    for record in runs:
        if record["task"] == "adding" and record["status"] == "ok":
            by_model.setdefault(record["model"], []).append(record["metrics"]["test"]["mse"])
    for model, values in sorted(by_model.items(), key=lambda item: statistics.mean(item[1])):
        seeds = ", ".join(f"{v:.4f}" for v in values)
        print(f"  {model:<16} {statistics.mean(values):.4f}  ({seeds})")
    tanh = statistics.mean(by_model.get("hidden-feedback", [float("nan")]))
    gated = {m: statistics.mean(by_model[m]) for m in ("lstm", "gru") if m in by_model}
    verdict = all(value < tanh for value in gated.values()) and len(gated) == 2
    print(f"gated rows below plain tanh on adding: {verdict}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
