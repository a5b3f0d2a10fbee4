"""Equal tuning budgets: one Optuna study per (task, model), shared by every seed of that pair.

The protocol (Melis, Dyer & Blunsom, ICLR 2018): each topology gets the same number of trials
(``protocol.trials``) over its declared options and the optimiser's ranges
(``loopzoo.harness.search_space``), each trial trained on the training split and scored on the
validation split only; the best configuration is then trained once per seed and scored on test
once. Trials use seeds ``TRIAL_SEED_BASE + trial number``, never a seed of the comparison.

Durability: a study lives in Optuna's relational storage (``protocol.storage``: a database URL;
null is ``DIR/studies.sqlite3``). Every job of the pair runs missing trials until the study has
``trials`` finished ones (complete or pruned; a diverged trial is pruned), then waits for trials
other jobs are running. A running trial holds an ``flock`` on its lock file, so a trial whose
process died (kill -9) is recognised and marked failed at once, and a restart runs a new trial in
its place; finished trials are never repeated. Like every lock of the harness, ``flock`` spans
one machine: jobs on several nodes sharing a database URL need ``out`` on a file system whose
locks span nodes.

The chosen configuration is the best complete trial among the first ``trials`` finished ones (in
trial order), so a study that was extended never gives one topology more trials than another.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from omegaconf import DictConfig, OmegaConf

from loopzoo import _checks as checks
from loopzoo.harness import runids, state
from loopzoo.harness.errors import ConfigError, OutDirError, as_config_errors
from loopzoo.harness.search_space import (
    Tunable,
    apply_values,
    at_bound,
    describe_space,
    is_active,
    search_space,
)
from loopzoo.topologies._search import Choices, IntegerRange

__all__ = [
    "TRIAL_SEED_BASE",
    "SAMPLERS",
    "PRUNERS",
    "TrialOutcome",
    "TuningSettings",
    "read_tuning",
    "open_storage",
    "check_study",
    "ensure_trials",
    "tuning_summary",
    "chosen_config",
]

TRIAL_SEED_BASE = 10_000
SAMPLERS = ("tpe", "random")
PRUNERS = ("median", "none")
STORAGE_FILE = "studies.sqlite3"
# Keys that change how a study is searched or where it is stored, not what one trial trains.
_STUDY_EXCLUDED = ("seed", "protocol.trials", "protocol.space", "protocol.storage", "model.tune")
_WAIT_SECONDS = 1.0


@dataclass(frozen=True)
class TuningSettings:
    """The checked tuning settings of one job."""

    trials: int
    sampler: str
    pruner: str | None
    storage: str
    space: list[Tunable]
    study: str
    goal: str


@dataclass(frozen=True)
class TrialOutcome:
    """What training one trial produced: its best validation value, or why it has none."""

    value: float | None
    stopped: str  # early_stop | step_cap | diverged | pruned
    steps: int
    seconds: float


TrialRunner = Callable[[DictConfig, Path, Callable[[int, float], bool]], TrialOutcome]
"""``(trial config, trial folder, report(step, value) -> stop now) -> TrialOutcome``."""


def _study_name(cfg: DictConfig, space: list[Tunable]) -> str:
    content = runids.identity(cfg)
    for dotted in (*_STUDY_EXCLUDED, *(t.path for t in space)):
        *parents, leaf = dotted.split(".")
        node = content
        for key in parents:
            node = node.get(key) if isinstance(node, dict) else None
        if isinstance(node, dict):
            node.pop(leaf, None)
    canonical = json.dumps(content, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(canonical.encode("utf-8")).hexdigest()[:10]
    return f"{cfg.task.name}-{cfg.model.name}-{digest}"


_STORAGES: dict[str, Any] = {}


def _write_ahead_log(engine: Any) -> None:
    """SQLite in write-ahead-log mode without a sync per commit: parallel jobs read while one
    writes, and a commit survives the death of its process (kill -9), though not a power cut."""
    from sqlalchemy import event

    def on_connect(connection: Any, record: Any) -> None:
        cursor = connection.cursor()
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.close()

    event.listen(engine, "connect", on_connect)
    engine.dispose()  # connections opened before the listener was added


def open_storage(url: str) -> Any:
    """Optuna's RDB storage at ``url`` (cached per process); ``ConfigError`` if it cannot open."""
    if url in _STORAGES:
        return _STORAGES[url]
    import optuna

    optuna.logging.set_verbosity(optuna.logging.WARNING)
    kwargs = {"connect_args": {"timeout": 60}} if url.startswith("sqlite") else {}
    try:
        storage = optuna.storages.RDBStorage(url, engine_kwargs=kwargs)
        if url.startswith("sqlite"):
            _write_ahead_log(storage.engine)
        storage.get_all_studies()
    except Exception as error:  # any driver or connection error: the URL is unusable
        raise ConfigError(
            f"protocol.storage = {url!r} cannot be opened ({type(error).__name__}: {error}); "
            "accepted: null (a SQLite file in the output directory) or a database URL "
            "SQLAlchemy can open, e.g. sqlite:////abs/path/studies.sqlite3 or "
            "postgresql://user@host/db"
        ) from None
    _STORAGES[url] = storage
    return storage


def read_tuning(cfg: DictConfig) -> TuningSettings | None:
    """The checked tuning settings of ``cfg``, or None when ``protocol.trials`` is null.

    Checks the trial count, sampler, pruner and search space, and opens the storage; every
    problem is a ``ConfigError`` naming the field, raised before any training.
    """
    protocol = cfg.protocol
    if protocol.get("trials") is None:
        return None
    with as_config_errors():  # null trials (above) trains the configured values untuned
        trials = checks.integer("protocol.trials", protocol.get("trials"), minimum=1)
        sampler = checks.choice("protocol.sampler", protocol.get("sampler", "tpe"), SAMPLERS)
        pruner = checks.choice("protocol.pruner", protocol.get("pruner", "median"), PRUNERS)
    url = protocol.get("storage")
    if url is None:
        url = f"sqlite:///{(Path(cfg.out).resolve() / STORAGE_FILE).as_posix()}"
        Path(cfg.out).mkdir(parents=True, exist_ok=True)
    elif not isinstance(url, str) or not url:
        raise ConfigError(f"protocol.storage = {url!r} is invalid; accepted: null or a "
                          "database URL")
    space = search_space(cfg)
    open_storage(url)
    from loopzoo.tasks import TASKS

    goal = TASKS.get(cfg.task.name).goal
    return TuningSettings(trials, sampler, None if pruner == "none" else pruner, url, space,
                          _study_name(cfg, space), goal)


def _load_study(tuning: TuningSettings) -> Any:
    import optuna

    direction = "minimize" if tuning.goal == "min" else "maximize"
    return optuna.create_study(study_name=tuning.study, storage=open_storage(tuning.storage),
                               direction=direction, load_if_exists=True)


def check_study(cfg: DictConfig, tuning: TuningSettings) -> None:
    """Refuse (``OutDirError``) a study stored under this name with another search space.

    Called before any training; a study not stored yet passes.
    """
    storage = open_storage(tuning.storage)
    try:
        study_id = storage.get_study_id_from_name(tuning.study)
    except KeyError:
        return
    stored = storage.get_study_user_attrs(study_id).get("space")
    wanted = describe_space(tuning.space)
    if stored is not None and stored != json.loads(json.dumps(wanted)):
        changed = sorted(k for k in set(stored) | set(wanted) if stored.get(k) != wanted.get(k))
        before = json.dumps({k: stored.get(k) for k in changed})
        now = json.dumps({k: wanted.get(k) for k in changed})
        raise OutDirError(
            f"out={cfg.out}: study {tuning.study} was tuned over another search space "
            f"(differs in {', '.join(changed)}: stored {before}, now {now}); two searches are "
            "never mixed: restore the space or choose another out directory"
        )


def _sampler(tuning: TuningSettings, seed: int) -> Any:
    import warnings

    import optuna

    if tuning.sampler == "random":
        return optuna.samplers.RandomSampler(seed=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        # A few random trials first (common practice: a third of the budget, at least 3, at
        # most Optuna's default 10), then TPE over all names jointly, conditional ones grouped.
        startup = min(10, max(3, tuning.trials // 3))
        return optuna.samplers.TPESampler(seed=seed, n_startup_trials=startup,
                                          multivariate=True, group=True, constant_liar=True)


def _suggest(trial: Any, space: list[Tunable], data: Mapping[str, Any]) -> dict[str, Any]:
    chosen: dict[str, Any] = {}
    for tunable in space:
        if not is_active(tunable, chosen, data):
            continue
        search = tunable.search
        if isinstance(search, Choices):
            chosen[tunable.name] = trial.suggest_categorical(tunable.name, list(search.choices))
        elif isinstance(search, IntegerRange):
            chosen[tunable.name] = trial.suggest_int(tunable.name, search.low, search.high)
        else:
            chosen[tunable.name] = trial.suggest_float(tunable.name, search.low, search.high,
                                                       log=search.log)
    return chosen


def _trial_lock(out: Path, study: str, number: int) -> Path:
    return state.state_dir(out) / "locks" / "trials" / f"{study}-{number}.lock"


def _fail_stale(study: Any, out: Path) -> None:
    """Mark failed every running trial whose process is gone (its lock is free)."""
    from optuna.exceptions import UpdateFinishedTrialError
    from optuna.trial import TrialState

    for trial in study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)):
        with state.file_lock(_trial_lock(out, study.study_name, trial.number),
                             wait=False) as free:
            if not free:
                continue
            # Its owner may have told it and let go of its lock after the listing: not stale.
            with contextlib.suppress(UpdateFinishedTrialError):
                study._storage.set_trial_state_values(trial._trial_id, state=TrialState.FAIL)


def _finished(study: Any) -> list[Any]:
    from optuna.trial import TrialState

    return study.get_trials(deepcopy=False, states=(TrialState.COMPLETE, TrialState.PRUNED))


def ensure_trials(cfg: DictConfig, tuning: TuningSettings, run_trial: TrialRunner,
                  *, on_trial: Callable[[int, TrialOutcome], None] | None = None) -> Any:
    """Run this study's missing trials until it has ``tuning.trials`` finished ones; returns the
    Optuna study. Cooperates with other jobs of the same study (see the module docstring)."""
    from optuna.trial import TrialState

    out = Path(cfg.out)
    study = _load_study(tuning)
    study.pruner = _pruner_for(tuning, cfg)
    study_lock = state.state_dir(out) / "locks" / f"study-{tuning.study}.lock"
    data = OmegaConf.to_container(cfg, resolve=True)
    while True:
        with state.file_lock(study_lock):
            check_study(cfg, tuning)
            if "space" not in study.user_attrs:
                study.set_user_attr("space", describe_space(tuning.space))
            _fail_stale(study, out)
            finished = len(_finished(study))
            running = len(study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)))
            trial = None
            if finished >= tuning.trials:
                return study
            if finished + running < tuning.trials:
                # Seeded by the trial count: every study draws the same startup values (common
                # random numbers across topologies), and a restart never replays earlier draws.
                study.sampler = _sampler(tuning, seed=len(study.get_trials(deepcopy=False)))
                trial = study.ask()
                lock_path = _trial_lock(out, tuning.study, trial.number)
                lock_fd = _hold_forever(lock_path)
        if trial is None:
            time.sleep(_WAIT_SECONDS)  # other jobs are running the last trials
            continue
        told = False
        try:
            outcome = _run(trial, cfg, data, tuning, run_trial, out)
            # Told while its lock is still held: a trial whose lock is free and that is still
            # running would be taken by another job for the trial of a dead process.
            if outcome.value is None:
                study.tell(trial, state=TrialState.PRUNED)
            else:
                study.tell(trial, outcome.value)
            told = True
        finally:
            if not told:
                study.tell(trial, state=TrialState.FAIL)
            os.close(lock_fd)
        if on_trial is not None:
            on_trial(trial.number, outcome)


def _pruner_for(tuning: TuningSettings, cfg: DictConfig) -> Any:
    import optuna

    if tuning.pruner is None:
        return optuna.pruners.NopPruner()
    val_every = int(cfg.protocol.get("val_every") or 1)
    # Never prune before a few trials have finished or before a trial's second validation.
    return optuna.pruners.MedianPruner(n_startup_trials=max(2, tuning.trials // 4),
                                       n_warmup_steps=2 * val_every)


def _hold_forever(path: Path) -> int:
    """Take the lock at ``path`` until the returned descriptor is closed (or the process dies)."""
    import fcntl

    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    fcntl.flock(fd, fcntl.LOCK_EX)
    return fd


def _run(trial: Any, cfg: DictConfig, data: Mapping[str, Any], tuning: TuningSettings,
         run_trial: TrialRunner, out: Path) -> TrialOutcome:
    import shutil

    values = _suggest(trial, tuning.space, data)
    trial_cfg = apply_values(cfg, values)
    OmegaConf.set_struct(trial_cfg, False)
    trial_cfg.seed = TRIAL_SEED_BASE + trial.number
    OmegaConf.set_struct(trial_cfg, True)

    def report(step: int, value: float) -> bool:
        trial.report(value, step)
        return trial.should_prune()

    folder = state.state_dir(out) / "trials" / f"{tuning.study}-{trial.number}"
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    try:
        outcome = run_trial(trial_cfg, folder, report)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    for key, value in (("stopped", outcome.stopped), ("steps", outcome.steps),
                       ("seconds", outcome.seconds), ("seed", int(trial_cfg.seed))):
        trial.set_user_attr(key, value)
    return outcome


def tuning_summary(study: Any, tuning: TuningSettings) -> dict[str, Any]:
    """The record's ``tuning`` field: budget, space, the chosen values and every trial value.

    The chosen values are those of the best complete trial among the first ``trials`` finished
    ones; ``chosen`` is None when none of them completed. ``values`` holds, in trial order, the
    score of every complete trial and the best reported validation value of every pruned one:
    the draws of the expected-best-of-n curve (Dodge et al. 2019).
    """
    from optuna.trial import TrialState

    budget = sorted(_finished(study), key=lambda t: t.number)[: tuning.trials]
    complete = [t for t in budget if t.state == TrialState.COMPLETE]
    sign = 1.0 if tuning.goal == "min" else -1.0
    # A pruned trial was a draw of the budget too: its score is the best validation value it
    # reported before it was stopped. Diverged and refused trials have none.
    scores = [t.value if t.state == TrialState.COMPLETE
              else min(t.intermediate_values.values(), key=lambda v: sign * v)
              for t in budget
              if t.state == TrialState.COMPLETE or (t.user_attrs.get("stopped") == "pruned"
                                                    and t.intermediate_values)]
    best = min(complete, key=lambda t: (sign * t.value, t.number)) if complete else None
    chosen = dict(best.params) if best is not None else None
    return {
        "trials": tuning.trials,
        "completed": len(complete),
        "pruned": sum(t.user_attrs.get("stopped") == "pruned" for t in budget),
        "diverged": sum(t.user_attrs.get("stopped") == "diverged" for t in budget),
        "sampler": tuning.sampler,
        "pruner": tuning.pruner,
        "space": describe_space(tuning.space),
        "chosen": chosen,
        "at_bound": at_bound(tuning.space, chosen) if chosen is not None else [],
        "values": scores,
        "goal": tuning.goal,
        "study": tuning.study,
        "best_trial": best.number if best is not None else None,
        "trial_seconds": sum(float(t.user_attrs.get("seconds", 0.0)) for t in budget),
        "trial_steps": sum(int(t.user_attrs.get("steps", 0)) for t in budget),
    }


def chosen_config(cfg: DictConfig, summary: Mapping[str, Any]) -> DictConfig:
    """``cfg`` with the chosen values written in: what each seed of the comparison trains."""
    return apply_values(cfg, summary["chosen"] or {})
