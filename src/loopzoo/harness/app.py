"""Run one configured job: skip it if recorded, else train, record, and report progress.

``run_one`` is shared by ``loopzoo train`` (one run in this process) and by the jobs of
``loopzoo sweep`` (Hydra multirun; ``sweep_job`` is the task function its launcher calls).
"""

from __future__ import annotations

import json
import logging
import shutil
import time
import traceback
import warnings
from contextlib import nullcontext
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import hydra
from hydra.core.hydra_config import HydraConfig
from omegaconf import DictConfig, OmegaConf

from loopzoo._io import atomic_write_json, atomic_write_text
from loopzoo.harness import records, runids, running, state, tuning
from loopzoo.harness.config import cores
from loopzoo.harness.errors import ConfigError, OutDirError
from loopzoo.harness.reproduce import reproduce_command
from loopzoo.harness.shipped import CONFIG_MODULE

__all__ = ["Outcome", "run_one", "baselines_recorded", "ensure_baselines",
           "threads_for_launcher", "sweep_job"]

log = logging.getLogger(__name__)
# Lightning 2.6 with torch 2.13 warns about a deprecated pytree class on every fit; it is
# Lightning's internal use, says nothing about the run, and would drown the progress lines.
warnings.filterwarnings("ignore", message=".*LeafSpec.*", category=FutureWarning)


@dataclass(frozen=True)
class Outcome:
    """What happened to one job: a record status, "skipped" (already recorded) or "refused"."""

    run_id: str
    model: str
    task: str
    seed: int
    status: str
    seconds: float
    reason: str | None = None

    def line(self) -> str:
        """``model task seed=S status seconds`` for progress output."""
        why = f" ({self.reason})" if self.reason and self.status != "ok" else ""
        return (
            f"{self.model:<16} {self.task:<10} seed={self.seed:<3} {self.status:<8} "
            f"{self.seconds:7.1f} s{why}"
        )


def threads_for_launcher(launcher: DictConfig | dict[str, Any] | None) -> int:
    """Torch threads per run: cores / n_jobs for joblib, cpus_per_task for submitit, else cores."""
    total = cores()
    if not launcher:
        return total
    n_jobs = launcher.get("n_jobs")
    if n_jobs is not None:
        n_jobs = int(n_jobs)
        # joblib's convention: -1 is all cores, -2 all but one, ...
        parallel = n_jobs if n_jobs > 0 else max(1, total + 1 + n_jobs)
        return max(1, total // parallel)
    cpus = launcher.get("cpus_per_task")
    return int(cpus) if cpus else total


def _baselines_marker(cfg: DictConfig) -> Path:
    """The file listing the baseline records of the job's task (and seed) once all are written."""
    return state.state_dir(Path(cfg.out)) / "baselines" / f"{runids.baseline_group(cfg)}.json"


def _listed_baselines(cfg: DictConfig) -> list[str] | None:
    """Run ids of the job's baseline records as last written, or None before they all were."""
    marker = _baselines_marker(cfg)
    return json.loads(marker.read_text(encoding="utf-8"))["run_ids"] if marker.exists() else None


def baselines_recorded(cfg: DictConfig) -> bool:
    """Whether every baseline record of the job's task (and seed) is written and readable; the
    damaged ones are set aside (``records.existing_record``)."""
    listed = _listed_baselines(cfg)
    return listed is not None and all(
        [records.existing_record(cfg.out, rid) is not None for rid in listed])


def ensure_baselines(cfg: DictConfig) -> int:
    """Write the records of the task's classical baselines for this seed, once.

    Returns how many were written now (0 when all exist and are readable). Parallel jobs sharing
    a (task, seed) wait on one lock, so the baselines are computed once.
    """
    from loopzoo.harness.baselines import baseline_records

    out = Path(cfg.out)
    group = runids.baseline_group(cfg)
    with state.file_lock(state.state_dir(out) / "locks" / f"baselines-{group}.lock"):
        if baselines_recorded(cfg):
            return 0
        config = OmegaConf.to_container(cfg, resolve=True)
        bodies = baseline_records(cfg)
        written = [runids.baseline_run_id(cfg, body["model"]) for body in bodies]
        # Rows of a fixed record carry the seed of the job that computed them, so a job of
        # another seed redoing them names them anew: the earlier names go, never a row twice.
        for rid in set(_listed_baselines(cfg) or ()) - set(written):
            records.record_path(out, rid).unlink(missing_ok=True)
        records.claim_out_dir(out, cfg.suite)
        for rid, body in zip(written, bodies, strict=True):
            records.write_record(
                out, records.make_record(body, run_id=rid, kind=body["kind"], config=config))
        # The marker comes last: a kill before it only means the baselines are redone.
        atomic_write_json(_baselines_marker(cfg), {"run_ids": written})
        return len(written)


def _console_views(cfg: DictConfig) -> running.ViewFactory:
    """``loopzoo train``: a live bar (or a few lines) per fit on stdout; a trial's own end line
    is ``_trial_line``."""
    from loopzoo.engine.progress import ConsoleProgress

    def view(phase: running.Phase) -> ConsoleProgress:
        if phase is None:
            return ConsoleProgress(f"{cfg.model.name} {cfg.task.name} seed={cfg.seed}")
        return ConsoleProgress(f"  {running.phase_name(phase)} {cfg.model.name} {cfg.task.name}",
                               announce=False)

    return view


def _train(cfg: DictConfig, run_dir: Path, started: str,
           views: running.ViewFactory) -> dict[str, Any]:
    """The training engine's ``train_and_evaluate``; an unexpected error becomes a failed body."""
    from loopzoo.engine.training import train_and_evaluate

    try:
        return train_and_evaluate(cfg, run_dir, progress=views(None))
    except ConfigError:
        raise
    except Exception as error:  # recorded as failed so the sweep goes on
        atomic_write_text(run_dir / "error.txt", traceback.format_exc())
        reason = f"{type(error).__name__}: {error}"
        return records.failed_body(OmegaConf.to_container(cfg, resolve=True), reason, started)


def _trial_runner(settings: tuning.TuningSettings,
                  views: running.ViewFactory) -> tuning.TrialRunner:
    """Runs one tuning trial through the engine; a config the tuned values make impossible (e.g.
    a parameter budget too small for the depth) is a finished trial without a value."""
    from loopzoo.engine.training import validation_run

    def run(cfg: DictConfig, folder: Path, report: Any) -> tuning.TrialOutcome:
        tick = time.perf_counter()
        # Trial k trains with seed TRIAL_SEED_BASE + k (tuning's documented convention).
        number = int(cfg.seed) - tuning.TRIAL_SEED_BASE
        try:
            result = validation_run(cfg, folder, report,
                                    progress=views((number, settings.trials)))
        except ConfigError as error:
            log.warning("trial refused: %s", error)
            return tuning.TrialOutcome(None, "refused", 0, time.perf_counter() - tick)
        return tuning.TrialOutcome(result["value"], result["stopped"], result["steps"],
                                   result["seconds"])

    return run


def _trial_line(cfg: DictConfig, settings: tuning.TuningSettings) -> Any:
    def show(number: int, outcome: tuning.TrialOutcome) -> None:
        value = "-" if outcome.value is None else f"{outcome.value:.4g}"
        print(running.over_status_line(
            f"  trial {number:>3} {cfg.model.name:<16} {cfg.task.name:<10} val={value:<10} "
            f"{outcome.stopped:<10} {outcome.steps:>5} steps {outcome.seconds:6.1f} s"),
            flush=True)

    return show


def _tune_and_train(cfg: DictConfig, settings: tuning.TuningSettings | None, run_dir: Path,
                    started: str, rid: str, views: running.ViewFactory
                    ) -> tuple[dict[str, Any], DictConfig]:
    """Finish the study (if tuned), train its chosen values with this job's seed; returns the
    record body and the config that was trained. Each fit shows its progress on ``views``."""
    summary = None
    trained = cfg
    if settings is not None:
        try:
            study = tuning.ensure_trials(cfg, settings, _trial_runner(settings, views),
                                         on_trial=_trial_line(cfg, settings))
        except (ConfigError, OutDirError):
            raise
        except Exception as error:  # recorded as failed (redone on rerun) so the sweep goes on
            atomic_write_text(run_dir / "error.txt", traceback.format_exc())
            reason = f"a tuning trial failed: {type(error).__name__}: {error}"
            config = OmegaConf.to_container(cfg, resolve=True)
            return records.failed_body(config, reason, started), cfg
        summary = tuning.tuning_summary(study, settings)
        if summary["chosen"] is None:
            reason = (f"no trial of study {summary['study']} completed ({summary['diverged']} "
                      f"diverged, {summary['pruned']} pruned, of {summary['trials']})")
            body = records.failed_body(OmegaConf.to_container(cfg, resolve=True), reason, started)
            body["tuning"] = summary
            return body, cfg
        trained = tuning.chosen_config(cfg, summary)
    body = _train(trained, run_dir, started, views)
    body["tuning"] = summary
    body["reproduce"] = reproduce_command(trained, out=f"reproduce/{rid}")
    return body, trained


def run_one(cfg: DictConfig, *, threads: int | None = None, sweep: bool = False) -> Outcome:
    """Run the job ``cfg`` (a ``finish_config`` result) unless its record is kept on rerun.

    Writes ``out/records/<run_id>.json`` atomically, then the task's baseline records for the
    seed (once per task config and seed). Raises ``ConfigError`` for configs refused before
    training and ``OutDirError`` for an output directory of another suite or schema.
    ``sweep`` keeps the job's training progress in its progress file (``running``) for the
    sweep's display, instead of on stdout, and counts the job in the sweep's progress.
    """
    import torch

    out = Path(cfg.out)
    records.check_out_dir(out, cfg.suite)  # claimed only when its first record is written
    previous_threads = torch.get_num_threads()
    torch.set_num_threads(threads or cores())
    try:
        return _run_locked(cfg, out, sweep)
    finally:
        torch.set_num_threads(previous_threads)


def _changed_files(body: dict[str, Any], content: dict[str, Any]) -> dict[str, Any]:
    """``body`` as a failed run if a user file the run read differs from the one its run id was
    derived from (the file changed while the run started): the next run redoes it."""
    expected = {f["role"]: f["sha256"] for f in content.get("data", [])}
    read = {f["role"]: f["sha256"] for f in (body.get("data") or {}).get("files", [])}
    changed = sorted(role for role in read if read[role] != expected.get(role))
    if not changed:
        return body
    reason = (f"task.options.{changed[0]} changed while the run started (its run id was derived "
              "from the earlier content); run again")
    return {**body, "status": "failed", "reason": reason, "metrics": {}}


def _run_locked(cfg: DictConfig, out: Path, sweep: bool) -> Outcome:
    content = runids.identity(cfg)
    rid = runids.run_id(content)
    tick = time.perf_counter()
    settings = tuning.read_tuning(cfg)  # refused here, before any training
    if settings is not None:
        tuning.check_study(cfg, settings)
    with state.file_lock(state.state_dir(out) / "locks" / f"{rid}.lock"):
        kept = records.is_done(out, rid)
        if kept is not None:
            status, reason = "skipped", f"recorded {kept['status']}"
        else:
            started = records.utc_now()
            run_dir = out / "runs" / rid
            shutil.rmtree(run_dir, ignore_errors=True)  # leftovers of an interrupted attempt
            run_dir.mkdir(parents=True)
            with (running.job_progress(out, rid, cfg) if sweep
                  else nullcontext(_console_views(cfg))) as views:
                body, trained = _tune_and_train(cfg, settings, run_dir, started, rid, views)
            body = _changed_files(body, content)
            # The config that was trained: the job's, with the tuned values written in.
            config = OmegaConf.to_container(trained, resolve=True)
            records.claim_out_dir(out, cfg.suite)
            records.write_record(
                out, records.make_record(body, run_id=rid, kind="model", config=config)
            )
            status, reason = body["status"], body.get("reason")
        # After the run, so a config refused before training leaves no record at all; also
        # after a kept run, whose baselines may be missing or damaged.
        try:
            ensure_baselines(cfg)
        except Exception as error:  # the run's record stands; the next run retries these
            log.warning("baselines of task %s seed %s not recorded: %s: %s",
                        cfg.task.name, cfg.seed, type(error).__name__, error)
    return Outcome(rid, cfg.model.name, cfg.task.name, int(cfg.seed), status,
                   time.perf_counter() - tick, reason)


def _planned(cfg: DictConfig) -> DictConfig:
    """The job's config as ``plan_sweep`` finished it (each job is finished once, up front);
    the launcher passes only the job's place in the plan."""
    index = cfg.get(state.JOB_INDEX)
    planned = None if index is None else state.planned_job(cfg.out, int(index))
    if planned is None:
        raise ConfigError(f"job {index} is not in the sweep plan of out={cfg.out}; start sweeps "
                          "with `loopzoo sweep`")
    job = OmegaConf.create(planned)
    OmegaConf.set_struct(job, True)
    return job


def sweep_job(cfg: DictConfig) -> dict[str, Any]:
    """Hydra task function of one sweep job; never raises, so the sweep always goes on."""
    hydra_cfg = HydraConfig.get()
    logging.getLogger("lightning").setLevel(logging.WARNING)
    tick = time.perf_counter()
    job = cfg
    try:
        job = _planned(cfg)
        outcome = run_one(job, threads=threads_for_launcher(hydra_cfg.launcher), sweep=True)
    except (ConfigError, OutDirError) as error:
        outcome = Outcome("-", str(job.model.name), str(job.task.name), int(job.seed), "refused",
                          time.perf_counter() - tick, str(error))
    except Exception as error:  # a harness bug: shown, and the sweep goes on
        log.exception("job %s failed outside training", cfg.get(state.JOB_INDEX))
        outcome = Outcome("-", str(job.model.name), str(job.task.name), int(job.seed), "refused",
                          time.perf_counter() - tick, f"{type(error).__name__}: {error}")
    done = state.count_finished(cfg.out, asdict(outcome))
    prefix = f"[{done[0]:>3}/{done[1]}] " if done else ""
    print(running.over_status_line(prefix + outcome.line()), flush=True)
    return asdict(outcome)


# The launcher pickles ``sweep_job`` by reference, so the decorated entry point gets its own name.
hydra_sweep_entry = hydra.main(
    version_base="1.3", config_path=f"pkg://{CONFIG_MODULE}", config_name="config"
)(sweep_job)
