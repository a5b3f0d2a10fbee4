"""Studies: the budget is exact, finished trials are never redone, the best complete trial is
chosen, and bad settings are refused before any trial runs.

The trial runner here is a stand-in scoring a known function of the suggested values (no
training), so these tests check the bookkeeping; real training and a real kill -9 are in
test_tuning_resume.py (slow).
"""

import json
import math

import pytest

from loopzoo.harness.config import compose_job, composer
from loopzoo.harness.errors import ConfigError, OutDirError
from loopzoo.harness.tuning import (
    TRIAL_SEED_BASE,
    TrialOutcome,
    ensure_trials,
    read_tuning,
    tuning_summary,
)


def job(tmp_path, *overrides):
    with composer():
        return compose_job(["model=lstm", "task=adding", *overrides, f"out={tmp_path}"])


def quadratic_runner(calls):
    """Validation 'loss' (log10 lr + 2)^2: the best rate is 0.01."""

    def run(cfg, folder, report):
        assert folder.is_dir()
        calls.append((float(cfg.optim.lr), int(cfg.seed)))
        value = (math.log10(cfg.optim.lr) + 2.0) ** 2
        report(50, value)
        return TrialOutcome(value, "early_stop", 50, 0.01)

    return run


def test_a_study_runs_exactly_its_budget_and_a_rerun_runs_nothing(tmp_path):
    cfg = job(tmp_path, "protocol.trials=6")
    tuning = read_tuning(cfg)
    calls = []
    study = ensure_trials(cfg, tuning, quadratic_runner(calls))
    assert len(calls) == 6 and len(study.trials) == 6
    # Trials use their own seeds, never the comparison's.
    assert [seed for _, seed in calls] == [TRIAL_SEED_BASE + n for n in range(6)]
    ensure_trials(cfg, read_tuning(job(tmp_path, "protocol.trials=6", "seed=2")),
                  quadratic_runner(calls))
    assert len(calls) == 6  # another seed of the same pair shares the finished study
    summary = tuning_summary(study, tuning)
    assert summary["trials"] == 6 and summary["completed"] == 6
    assert len(summary["values"]) == 6
    best = min(range(6), key=lambda i: summary["values"][i])
    assert summary["best_trial"] == best
    assert summary["chosen"]["lr"] == pytest.approx(calls[best][0])
    assert summary["study"].startswith("adding-lstm-")
    assert set(summary["space"]) == {"lr", "weight_decay", "num_layers", "dropout"}


def test_raising_the_budget_continues_the_study_and_only_the_first_n_count(tmp_path):
    calls = []
    cfg = job(tmp_path, "protocol.trials=3")
    ensure_trials(cfg, read_tuning(cfg), quadratic_runner(calls))
    bigger = job(tmp_path, "protocol.trials=5")
    study = ensure_trials(bigger, read_tuning(bigger), quadratic_runner(calls))
    assert len(calls) == 5
    # Read with the smaller budget, only the first three trials compete.
    small = tuning_summary(study, read_tuning(cfg))
    assert small["trials"] == 3 and len(small["values"]) == 3


def test_pruned_and_diverged_trials_use_the_budget_but_are_never_chosen(tmp_path):
    cfg = job(tmp_path, "protocol.trials=4")
    outcomes = iter([TrialOutcome(None, "diverged", 10, 0.0), TrialOutcome(0.5, "early_stop", 9, 0),
                     TrialOutcome(None, "pruned", 100, 0.0), TrialOutcome(0.7, "step_cap", 9, 0)])

    def runner(c, f, report):
        outcome = next(outcomes)
        if outcome.stopped == "pruned":  # reported validation values, then was stopped
            report(50, 0.9)
            report(100, 0.8)
        return outcome

    study = ensure_trials(cfg, read_tuning(cfg), runner)
    summary = tuning_summary(study, read_tuning(cfg))
    assert summary["completed"] == 2 and summary["pruned"] == 1 and summary["diverged"] == 1
    assert summary["best_trial"] == 1
    # The expected-best-of-n draws: complete values and the pruned trial's best reported value.
    assert summary["values"] == [0.5, 0.8, 0.7]


def test_a_trial_that_raises_is_marked_failed_and_does_not_count(tmp_path):
    from optuna.trial import TrialState

    cfg = job(tmp_path, "protocol.trials=2")

    def broken(c, f, r):
        raise RuntimeError("boom")

    with pytest.raises(RuntimeError, match="boom"):
        ensure_trials(cfg, read_tuning(cfg), broken)
    calls = []
    study = ensure_trials(cfg, read_tuning(cfg), quadratic_runner(calls))
    states = [t.state for t in study.trials]
    assert states == [TrialState.FAIL, TrialState.COMPLETE, TrialState.COMPLETE]
    assert len(calls) == 2


def test_a_trial_told_after_another_job_listed_it_as_running_stays_as_told(tmp_path):
    """Seen in a two-worker quick sweep: job B listed the running trials, job A told its trial
    and let go of the trial's lock, then B found that lock free and marked the finished trial
    failed, which Optuna refuses (UpdateFinishedTrialError) and which failed B's run."""
    from optuna.trial import TrialState

    from loopzoo.harness import tuning as tuning_module

    cfg = job(tmp_path, "protocol.trials=2")
    settings = read_tuning(cfg)
    study = tuning_module._load_study(settings)
    trial = study.ask()
    listed = study.get_trials(deepcopy=True, states=(TrialState.RUNNING,))  # job B's listing
    study.tell(trial, 1.0)  # job A; its lock is free again
    study.get_trials = lambda deepcopy=False, states=None: listed
    tuning_module._fail_stale(study, tmp_path)
    assert tuning_module._load_study(settings).trials[0].state == TrialState.COMPLETE


@pytest.mark.parametrize(("overrides", "message"), [
    (["protocol.trials=0"], r"protocol\.trials = 0 is invalid; accepted: an integer >= 1"),
    (["protocol.trials=2.5"], r"protocol\.trials = 2.5 is invalid"),
    (["protocol.sampler=grid"], r"protocol\.sampler = 'grid' is invalid; accepted: one of 'tpe'"),
    (["protocol.pruner=hyperband"], r"protocol\.pruner = 'hyperband' is invalid"),
    (["protocol.storage=nosuchdialect://x/y"], r"protocol\.storage = 'nosuchdialect://x/y' "
                                               r"cannot be opened"),
    (["protocol.storage=sqlite:////no/such/folder/s.db"], r"protocol\.storage .* cannot be opened"),
])
def test_bad_tuning_settings_are_refused_naming_the_field(tmp_path, overrides, message):
    with pytest.raises(ConfigError, match=message):
        read_tuning(job(tmp_path, *overrides))


def test_null_trials_means_no_tuning(tmp_path):
    assert read_tuning(job(tmp_path, "protocol.trials=null")) is None


def test_a_changed_search_space_in_the_same_out_is_refused(tmp_path):
    cfg = job(tmp_path, "protocol.trials=2")
    ensure_trials(cfg, read_tuning(cfg), quadratic_runner([]))
    changed = job(tmp_path, "protocol.trials=2", "protocol.space.lr.high=0.1")
    with pytest.raises(OutDirError, match=r"another search space \(differs in lr: stored "
                                          r".*\"high\": 0.3.*now .*\"high\": 0.1"):
        ensure_trials(changed, read_tuning(changed), quadratic_runner([]))
    stored = json.loads(json.dumps(tuning_summary(
        ensure_trials(cfg, read_tuning(cfg), quadratic_runner([])), read_tuning(cfg))["space"]))
    assert stored["lr"]["high"] == 0.3
