"""``loopzoo sweep``: expand the sweep, check every job, then hand it to Hydra's multirun.

Before any training the whole sweep is composed job by job (so a bad name or key anywhere is
refused up front), the output directory is checked and locked (its first record claims it),
and the progress plan is written. Jobs whose record is kept on rerun (``records.KEPT_ON_RERUN``)
are skipped there, in this process; the launcher (``hydra/launcher``, joblib by default) runs
``app.sweep_job`` only for the others, each once per distinct run id (and for one job of a task
whose baseline records are missing or damaged), so a finished sweep starts no worker at all.
"""

from __future__ import annotations

import copy
import sys
import time
from collections import Counter
from contextlib import nullcontext
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from omegaconf import DictConfig, OmegaConf

from loopzoo import _checks as checks
from loopzoo.harness import records, runids, running, state, tuning
from loopzoo.harness.config import (
    compose_job,
    composer,
    finish_config,
    parse_overrides,
    plain_task_options,
)
from loopzoo.harness.errors import ConfigError, as_config_errors
from loopzoo.harness.hydra_private import run_multirun, split_jobs

__all__ = ["SweepPlan", "plan_sweep", "run_sweep"]


@dataclass(frozen=True)
class SweepPlan:
    """The expanded sweep: each job's override list and finished config, and its output dir."""

    overrides: list[list[str]]
    jobs: list[DictConfig]
    out: Path
    suite: str | None

    @property
    def run_ids(self) -> list[str]:
        """Run id of every job, in launch order."""
        return [runids.run_id(job) for job in self.jobs]


def _sweep_lists(base: DictConfig) -> list[str]:
    params = base.hydra.sweeper.get("params")
    if params is None:
        return []
    return [f"{key}={value}" for key, value in OmegaConf.to_container(params).items()]


# Launcher settings that count something (workers, cores, minutes, GB): positive integers.
_POSITIVE_LAUNCHER_KEYS = ("cpus_per_task", "timeout_min", "mem_gb", "nodes", "tasks_per_node",
                           "array_parallelism")


def _check_launcher(launcher: DictConfig) -> None:
    """Launcher settings the launcher itself would only reject with a traceback mid-sweep."""
    n_jobs = launcher.get("n_jobs")
    if n_jobs is not None and (isinstance(n_jobs, bool) or not isinstance(n_jobs, int)
                               or n_jobs == 0):
        raise ConfigError(f"hydra.launcher.n_jobs = {n_jobs!r} is invalid; accepted: a positive "
                          "number of parallel jobs, or -1 for one per core (-2: all but one, ...)")
    for key in _POSITIVE_LAUNCHER_KEYS:
        if launcher.get(key) is not None:
            with as_config_errors():
                checks.integer(f"hydra.launcher.{key}", launcher.get(key), minimum=1)


def plan_sweep(overrides: list[str]) -> SweepPlan:
    """Expand ``overrides`` plus the suite's sweep lists exactly as Hydra's basic sweeper does
    (the command line wins for a key in both) and compose every job; ``ConfigError`` on any
    bad job, naming it."""
    parsed = parse_overrides(overrides)
    for override in parsed:
        if override.key_or_group == "suite" and override.is_sweep_override():
            raise ConfigError("suite takes one name per sweep; run one sweep per suite")
    fixed = [o.input_line for o in parsed if not o.is_sweep_override()]
    with composer():
        base = compose_job(fixed, with_hydra=True)
        _check_launcher(base.hydra.launcher)
        combined = parse_overrides(_sweep_lists(base) + list(overrides))
        job_overrides = split_jobs(combined)
        jobs = _compose_jobs(job_overrides)
    outs = {job.out for job in jobs}
    if len(outs) != 1:
        raise ConfigError(f"out must be one directory per sweep, got {', '.join(sorted(outs))}")
    return SweepPlan(job_overrides, jobs, Path(outs.pop()), jobs[0].suite)


def _plain_seed(override: str) -> int | None:
    """The seed of a ``seed=N`` override (N a non-negative integer written out), else None."""
    key, _, value = override.partition("=")
    return int(value) if key == "seed" and value.isdigit() else None


def _reads_seed(raw: DictConfig) -> bool:
    """Whether any value of the unresolved config interpolates the seed, e.g.
    ``out=runs/s${seed}``: then each seed needs a composition of its own."""
    pending: list[Any] = [OmegaConf.to_container(raw, resolve=False)]
    while pending:
        node = pending.pop()
        for value in node.values() if isinstance(node, dict) else node:
            if isinstance(value, dict | list):
                pending.append(value)
            elif isinstance(value, str) and "${" in value and "seed" in value:
                return True
    return False


def _compose_jobs(job_overrides: list[list[str]]) -> list[DictConfig]:
    """Every job's finished config. Jobs that differ only in a plain ``seed=N`` are composed once
    and given their seed, since Hydra's composition is most of a plan's time, unless the config
    interpolates the seed somewhere; any other job is composed as it is."""
    shared: dict[tuple[str, ...], DictConfig | None] = {}
    jobs = []
    for job in job_overrides:
        seeds = [seed for seed in map(_plain_seed, job) if seed is not None]
        rest = tuple(o for o in job if _plain_seed(o) is None)
        try:
            if seeds and rest not in shared:
                raw = compose_job(list(rest), with_hydra=True)
                OmegaConf.set_struct(raw, False)
                raw.pop("hydra")  # the launcher's node, as compose_job leaves it out
                shared[rest] = (None if _reads_seed(raw) else
                                finish_config(raw, plain_task_options(list(rest))))
            template = shared.get(rest) if seeds else None
            if template is None:
                jobs.append(compose_job(job))
                continue
        except ConfigError as error:
            raise ConfigError(f"job {' '.join(job)}: {error}") from None
        finished = copy.deepcopy(template)
        finished.seed = seeds[-1]
        jobs.append(finished)
    return jobs


def _remove_stale_temp_files(out: Path) -> None:
    # An atomic write killed before its rename leaves a hidden temporary file; no job is
    # running while the sweep lock is held, so these are all stale.
    for tmp in records.records_dir(out).glob(".*.tmp"):
        tmp.unlink(missing_ok=True)


def _check_studies(plan: SweepPlan) -> None:
    """Tuning settings of every job, and the stored studies' search spaces, before any training."""
    checked: set[str] = set()
    for overrides, job in zip(plan.overrides, plan.jobs, strict=True):
        try:
            settings = tuning.read_tuning(job)
            if settings is not None and settings.study not in checked:
                tuning.check_study(job, settings)
                checked.add(settings.study)
        except ConfigError as error:
            raise ConfigError(f"job {' '.join(overrides)}: {error}") from None


def _to_launch(plan: SweepPlan, ids: list[str]) -> list[int]:
    """Places in ``plan`` (whose run ids are ``ids``) of the jobs to run: the first job of each
    distinct run id whose record is not kept on rerun, and the first job of each task (and seed)
    whose baseline records are missing or damaged and that none of those jobs will write."""
    from loopzoo.harness.app import baselines_recorded

    chosen: dict[str, int] = {}
    for index, rid in enumerate(ids):
        if rid not in chosen and records.is_done(plan.out, rid) is None:
            chosen[rid] = index
    covered = {runids.baseline_group(plan.jobs[index]) for index in chosen.values()}
    for index, job in enumerate(plan.jobs):
        group = runids.baseline_group(job)
        if group not in covered:
            covered.add(group)
            if not baselines_recorded(job):
                chosen[ids[index]] = index
    return sorted(chosen.values())


def _launcher_overrides(overrides: list[str], jobs: int, token: str) -> list[str]:
    """The multirun's arguments for jobs 0..jobs-1 of the written plan: the command line's fixed
    overrides (launcher choice and settings included), the suite's sweep lists switched off,
    and one sweep over the plan's places."""
    fixed = [o.input_line for o in parse_overrides(overrides) if not o.is_sweep_override()]
    return [
        *fixed,
        "hydra.sweeper.params=null",
        f"+{state.JOB_INDEX}={','.join(str(i) for i in range(jobs))}",
        # Hydra sets hydra.job.env_set in each job's process before the job runs, also in
        # reused workers; it is launcher configuration, not part of the job's config.
        f"+hydra.job.env_set.{state.SWEEP_TOKEN}={token}",
    ]


def run_sweep(overrides: list[str]) -> int:
    """Run the sweep; print one line per finished job, the running jobs' progress while they
    run (``running.RunningDisplay``; off with ``trainer.enable_progress_bar=false``) and a
    summary. Returns the exit code:
    0 when every job ran or was skipped (diverged and failed runs are recorded results),
    2 when jobs were refused (their reasons are printed)."""
    from loopzoo.harness.app import hydra_sweep_entry

    tick = time.perf_counter()
    overrides = plain_task_options(overrides)
    plan = plan_sweep(overrides)
    records.check_out_dir(plan.out, plan.suite)  # claimed by the first record written
    _check_studies(plan)
    with state.sweep_lock(plan.out):
        _remove_stale_temp_files(plan.out)
        running.clear(plan.out)
        ids = plan.run_ids  # hashes every user file once
        launch = _to_launch(plan, ids)
        distinct = len(set(ids))
        print(
            f"sweep: {len(plan.jobs)} runs ({distinct} distinct), {distinct - len(launch)} "
            f"already recorded, {len(launch)} to run, out={plan.out}"
            + (f", suite={plan.suite}" if plan.suite else ""),
            flush=True,
        )
        finished: list[dict] = []
        if launch:
            token = state.write_plan(plan.out,
                                     [OmegaConf.to_container(plan.jobs[i]) for i in launch])
            shown = any(plan.jobs[i].trainer.get("enable_progress_bar", True) for i in launch)
            with (running.RunningDisplay(plan.out, token, len(launch)) if shown
                  else nullcontext()):
                run_multirun(hydra_sweep_entry, _launcher_overrides(overrides, len(launch), token))
            finished = (state.read_plan(plan.out) or {}).get("finished", [])
            state.end_plan(plan.out)
    counts = Counter(outcome["status"] for outcome in finished)
    if distinct > len(launch):
        counts["skipped"] += distinct - len(launch)
    summary = ", ".join(f"{n} {status}" for status, n in sorted(counts.items()))
    print(f"sweep done in {time.perf_counter() - tick:.0f} s: {summary or 'nothing ran'}; "
          f"records in {records.records_dir(plan.out)}")
    refused = [o for o in finished if o["status"] == "refused"]
    for outcome in refused:
        print(f"refused: {outcome['model']} {outcome['task']} seed={outcome['seed']}: "
              f"{outcome['reason']}", file=sys.stderr)
    missing = len(launch) - len(finished)
    if missing:
        print(f"{missing} jobs did not report back", file=sys.stderr)
    return 2 if refused or missing else 0
