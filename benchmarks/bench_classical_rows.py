"""Cost of every classical row and bound on the built-in suites' tasks, one seed.

Prints, per task (with the suite's options) and row: status, the primary metric, the row's own
``fit_seconds`` (wall) and the process CPU seconds spent computing it, then the totals per suite.
Rows of tasks whose data do not change with the seed are computed once per sweep; the others
once per seed (3 in the shipped suites), which the totals account for.

    .venv/bin/python benchmarks/bench_classical_rows.py
"""

from __future__ import annotations

import time

import loopzoo

SUITES = {
    "quick": [("reber", {}), ("sines", {"length": 30}), ("digits", {})],
    "forecasting": [("sines", {}), ("sunspots", {}), ("co2", {}), ("elnino", {})],
}
SEEDS = 3


def main() -> None:
    print("| suite | task | row | kind | status | metric | fit s (wall) | CPU s |")
    print("| --- | --- | --- | --- | --- | ---: | ---: | ---: |")
    totals = {}
    for suite, tasks in SUITES.items():
        cpu_total = 0.0
        for name, options in tasks:
            task = loopzoo.tasks.create(name, seed=0, **options)
            task.split("train")
            runs = SEEDS if task.seed_changes_data else 1
            for source in (task.baselines, task.bounds):
                rows = source()
                for row_name in rows:
                    start = time.process_time()
                    row = rows[row_name]
                    cpu = time.process_time() - start
                    cpu_total += cpu * runs
                    value = row.metrics.get(task.metric)
                    shown = f"{value:.4g}" if value is not None else "-"
                    fit = f"{row.fit_seconds:.2f}" if row.fit_seconds is not None else "-"
                    print(f"| {suite} | {name} | {row_name} | {row.kind} | {row.status} | "
                          f"{shown} | {fit} | {cpu:.2f} |")
        totals[suite] = cpu_total
    for suite, cpu in totals.items():
        print(f"{suite}: {cpu:.1f} CPU s for all rows of a sweep ({SEEDS} seeds)")


if __name__ == "__main__":
    main()
