"""Time the ``quick`` suite end to end and measure the protocol's bars.

    python benchmarks/bench_quick_suite.py [OUT]          # run the suite, then measure
    python benchmarks/bench_quick_suite.py --measure OUT  # measure an existing output folder

Runs ``loopzoo sweep suite=quick out=OUT`` in a subprocess (OUT must be new or hold an earlier
run of this suite: recorded runs are skipped, so use a fresh folder for a timing) and prints the
wall time, the CPU time of the sweep and its workers, the load average before and after (the
machine is shared: wall time under load says little, CPU time / cores bounds it on an idle
machine). Then, from the records: the share of runs stopped by the step cap, the (task, topology)
rows with a tuned value at a soft edge of its range, and on the adding task each topology's test
MSE with a Welch t-test on log MSE against the best row, Holm-corrected over the comparisons
(Holm 1979; scipy.stats.ttest_ind, statsmodels multipletests), where plain tanh
(hidden-feedback) should come out significantly worse than the best gated row (Hochreiter &
Schmidhuber 1997; Le, Jaitly & Hinton 2015).
"""

from __future__ import annotations

import math
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


def run(out: Path) -> None:
    load_before = os.getloadavg()
    tick = time.perf_counter()
    subprocess.run([sys.executable, "-m", "loopzoo.cli", "sweep", "suite=quick", f"out={out}"],
                   check=True)
    wall = time.perf_counter() - tick
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = usage.ru_utime + usage.ru_stime
    load_after = os.getloadavg()
    print(f"out: {out}")
    print(f"wall: {wall:.0f} s; CPU (sweep + workers): {cpu:.0f} s; cores: {cores()}; "
          f"CPU / cores: {cpu / cores():.0f} s")
    print(f"load average (1, 5, 15 min) before: {load_before}, after: {load_after}")


def measure(out: Path) -> None:
    from scipy.stats import ttest_ind
    from statsmodels.stats.multitest import multipletests

    runs = [r for r in load_records(out) if r["kind"] == "model"]
    ok = [r for r in runs if r["status"] == "ok"]
    print(f"runs: {len(runs)} ({len(ok)} ok)")
    capped = [r for r in runs if (r.get("convergence") or {}).get("stopped") == "step_cap"]
    print(f"stopped at the step cap: {len(capped)} of {len(runs)} "
          f"({100 * len(capped) / max(len(runs), 1):.0f}%): "
          + ", ".join(sorted(f"{r['task']}/{r['model']}/s{r['seed']}" for r in capped)))
    rows = {}
    for record in runs:
        if record.get("tuning"):
            rows[(record["task"], record["model"])] = record["tuning"]
    bound = {key: t["at_bound"] for key, t in rows.items() if t["at_bound"]}
    print(f"rows with a tuned value at a bound: {len(bound)} of {len(rows)} "
          f"({100 * len(bound) / max(len(rows), 1):.0f}%): "
          + ", ".join(f"{task}/{model} {names}" for (task, model), names in sorted(bound.items())))
    trial_seconds = sum(t["trial_seconds"] for t in rows.values())
    train_seconds = sum((r.get("cost") or {}).get("wall_seconds") or 0.0 for r in ok)
    print(f"wall seconds inside trials: {trial_seconds:.0f}; inside final runs: "
          f"{train_seconds:.0f}")
    print("adding, test MSE by topology (mean over seeds), Welch on log MSE vs the best, Holm:")
    by_model: dict[str, list[float]] = {}
    for record in ok:
        if record["task"] == "adding":
            by_model.setdefault(record["model"], []).append(record["metrics"]["test"]["mse"])
    logs = {m: [math.log(v) for v in values] for m, values in by_model.items()}
    best = min(logs, key=lambda m: statistics.mean(logs[m]))
    others = [m for m in logs if m != best]
    raw = [ttest_ind(logs[m], logs[best], equal_var=False).pvalue for m in others]
    reject, adjusted, _, _ = multipletests(raw, alpha=0.05, method="holm")
    tests = {m: (p, q, r) for m, p, q, r in zip(others, raw, adjusted, reject, strict=True)}
    for model, values in sorted(by_model.items(), key=lambda item: statistics.mean(item[1])):
        seeds = ", ".join(f"{v:.4g}" for v in values)
        chosen = rows.get(("adding", model), {}).get("chosen")
        line = f"  {model:<16} {statistics.mean(values):.4g}  ({seeds})"
        if model in tests:
            p, q, r = tests[model]
            line += f"  p={p:.3g} Holm p={q:.3g} {'worse' if r else 'not separated'}"
        else:
            line += "  best"
        print(line + f"  chosen={chosen}")
    gated = [m for m in ("lstm", "gru") if m in logs]
    best_gated = min(gated, key=lambda m: statistics.mean(logs[m])) if gated else None
    if best_gated == best and "hidden-feedback" in tests:
        verdict = tests["hidden-feedback"][2]
        print(f"plain tanh significantly worse than the best gated row ({best}) after Holm: "
              f"{bool(verdict)}")
    else:
        print(f"best row is {best}, not a gated row ({best_gated}); see the table")


def main(argv: list[str]) -> int:
    if argv[:1] == ["--measure"]:
        measure(Path(argv[1]))
        return 0
    out = Path(argv[0]) if argv else Path(tempfile.mkdtemp(prefix="loopzoo-quick-"))
    run(out)
    measure(out)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
