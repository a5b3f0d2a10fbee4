"""Planning cost of a sweep: composing every job one by one against the planner, which composes
jobs that differ only in their seed once.

    .venv/bin/python benchmarks/bench_sweep_planning.py [--rounds N] [OVERRIDES ...]

Expands the sweep (default: ``suite=quick``) as ``loopzoo sweep`` does, then times, in one
process and interleaved round by round, (a) ``compose_job`` for every job and (b)
``sweep._compose_jobs`` (what ``plan_sweep`` runs), checks that both give the same configs, and
prints the median seconds and the median ratio b / a.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

from loopzoo.harness.config import compose_job, composer, parse_overrides
from loopzoo.harness.hydra_private import split_jobs
from loopzoo.harness.sweep import _compose_jobs, _sweep_lists


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("overrides", nargs="*", default=["suite=quick", "out=/tmp/unused"])
    args = parser.parse_args(argv)
    with composer():
        base = compose_job(args.overrides, with_hydra=True)
        jobs = split_jobs(parse_overrides(_sweep_lists(base) + args.overrides))
        one_by_one, planner = [], []
        for _ in range(args.rounds):
            tick = time.perf_counter()
            each = [compose_job(job) for job in jobs]
            one_by_one.append(time.perf_counter() - tick)
            tick = time.perf_counter()
            shared = _compose_jobs(jobs)
            planner.append(time.perf_counter() - tick)
            assert each == shared, "the planner's configs differ from one-by-one composition"
    ratios = [b / a for a, b in zip(one_by_one, planner, strict=True)]
    print(f"{len(jobs)} jobs, {args.rounds} rounds")
    print(f"compose every job: {statistics.median(one_by_one):.2f} s (median)")
    print(f"planner:           {statistics.median(planner):.2f} s (median)")
    print(f"ratio planner / every job: {statistics.median(ratios):.2f} (median of rounds)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
