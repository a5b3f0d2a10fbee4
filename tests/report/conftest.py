"""Demo fixtures for the report tests: hand-made run records, invented for a made-up scenario.

Scenario (invented, demo only): a team monitoring water-pump vibration compares topologies on a
"pump-vibration" forecast (MSE, lower is better) and on a "valve-codes" symbol stream (accuracy,
higher is better). A third task, "flaky-rig", holds one record of every status the harness writes
(ok, diverged, failed) plus an ok run without its metric. None of these numbers were measured.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest

SEEDS = (0, 1, 2, 3)
# Per-seed offsets so the demo values have spread; fixed, not random, so tests are exact.
NOISE = (-1.0, 0.4, 1.1, -0.5)

# topology -> (quality centre, spread, step latency ms, params, gradient decay per lag)
PUMP = {
    "hidden-feedback": (0.050, 0.004, 0.040, 4980, 0.55),
    "output-feedback": (0.047, 0.004, 0.035, 4900, 0.60),
    "stacked": (0.030, 0.002, 0.080, 4990, 0.75),
    "lstm": (0.031, 0.002, 0.120, 4960, 0.92),
    "gru": (0.036, 0.002, 0.100, 4970, 0.88),
}
VALVE = {
    "hidden-feedback": (0.71, 0.02, 0.045, 9980, 0.5),
    "stacked": (0.80, 0.01, 0.090, 9990, 0.7),
    "lstm": (0.86, 0.01, 0.130, 9950, 0.9),
    "gru": (0.85, 0.01, 0.110, 9940, 0.9),
}


def record(**fields: Any) -> dict[str, Any]:
    """A record with every documented field; keyword arguments replace fields."""
    model = fields.get("model", "stacked")
    task = fields.get("task", "pump-vibration")
    seed = fields.get("seed", 0)
    base: dict[str, Any] = {
        "schema": "loopzoo.run/1",
        "run_id": f"{task}-{model}-s{seed}-demo",
        "kind": "model",
        "status": "ok",
        "reason": None,
        "diverged_at_step": None,
        "model": model,
        "task": task,
        "suite": "demo",
        "seed": seed,
        "params": 4987,
        "budget": 5000,
        "sizes": {"input_size": 2, "output_size": 1, "hidden_size": 28},
        "config": {"model": {"name": model, "options": {}, "feedback": None},
                   "task": {"name": task, "options": {"length": 50}}, "seed": seed},
        "versions": {"python": "3.11", "torch": "2.13.0+cpu", "loopzoo": "0.1.0"},
        "primary": {"name": "mse", "goal": "min"},
        "metrics": {"test": {"mse": 0.012, "mae": 0.08}, "val": {"mse": 0.011}},
        "lr": {"chosen": 0.003, "grid": [0.001, 0.003, 0.01], "val_by_lr": {}},
        "curves": {"step": [50, 100, 150], "train_loss": [0.2, 0.1, 0.05],
                   "val": [0.15, 0.09, 0.05]},
        "cost": {"wall_seconds": 12.3, "train_seconds": 10.1, "steps": 400,
                 "train_ms_per_step": 25.2, "step_latency_ms": 0.05,
                 "batched_step_latency_ms": 0.21, "batched_batch_size": 64,
                 "peak_memory_mb": 210.0, "clip_rate": 0.12},
        "gradient_reach": {"lags": [0, 1, 2, 3], "init": [1.0, 0.5, 0.05, 0.004],
                           "final": [1.0, 0.8, 0.6, 0.3]},
        "feedback": None,
        "started": "2026-12-01T20:00:00Z",
        "finished": "2026-12-01T20:00:12Z",
    }
    base.update(fields)
    return base


def _decay(rate: float, length: int = 30) -> list[float]:
    return [rate**lag for lag in range(length)]


def _model_record(task: str, model: str, seed: int, spec: tuple, metric: str, goal: str) -> dict:
    centre, spread, latency, params, decay = spec
    value = centre + spread * NOISE[seed]
    steps = [50 * (i + 1) for i in range(8)]
    sign = 1.0 if goal == "min" else -1.0
    val_curve = [value + sign * 0.5 * abs(centre) * math.exp(-i / 2) for i in range(8)]
    fields: dict[str, Any] = {
        "task": task, "model": model, "seed": seed, "params": params,
        "primary": {"name": metric, "goal": goal},
        "metrics": {"test": {metric: value}, "val": {metric: value * 0.98}},
        "curves": {"step": steps, "train_loss": val_curve, "val": val_curve},
        "cost": {"wall_seconds": 40.0 + seed, "train_seconds": 30.0 + 10 * latency * 100,
                 "steps": 400, "train_ms_per_step": 200 * latency, "step_latency_ms": latency,
                 "batched_step_latency_ms": 4 * latency, "batched_batch_size": 64,
                 "peak_memory_mb": 150 + 1000 * latency, "clip_rate": 0.1},
        "gradient_reach": {"lags": list(range(30)), "init": _decay(decay * 0.9),
                           "final": _decay(decay)},
    }
    if model == "output-feedback":
        fields["feedback"] = {"mode": "scheduled", "schedule": "inverse_sigmoid",
                              "fed_back": "distribution", "selected_on": "measured_feedback",
                              "observable": "next_step"}
        fields["metrics"]["test_measured_feedback"] = {metric: value}
        fields["metrics"]["test_free_running"] = {metric: value * 1.6}
        fields["metrics"]["val_free_running"] = {metric: value * 1.5}
    return record(**fields)


def _baseline(task: str, name: str, seed: int, value: float, metric: str, goal: str) -> dict:
    return record(task=task, model=name, seed=seed, kind="baseline", params=None,
                  primary={"name": metric, "goal": goal}, metrics={"test": {metric: value}},
                  cost=None, gradient_reach=None, curves=None, budget=None)


def demo_records() -> list[dict[str, Any]]:
    """Every demo record of the three invented tasks."""
    records = []
    for seed in SEEDS:
        for model, spec in PUMP.items():
            records.append(_model_record("pump-vibration", model, seed, spec, "mse", "min"))
        records.append(_baseline("pump-vibration", "last-value", seed, 0.090, "mse", "min"))
        for model, spec in VALVE.items():
            records.append(_model_record("valve-codes", model, seed, spec, "accuracy", "max"))
        records.append(
            _baseline("valve-codes", "majority-code", seed, 0.40, "accuracy", "max")
        )
    flaky = dict(task="flaky-rig", primary={"name": "mse", "goal": "min"})
    records += [
        record(model="stacked", seed=0, metrics={"test": {"mse": 0.02}}, **flaky),
        record(model="stacked", seed=1, metrics={"test": {"mse": 0.03}}, **flaky),
        record(model="stacked", seed=2, status="diverged", diverged_at_step=120,
               reason="loss became NaN", metrics={}, cost=None, gradient_reach=None,
               curves=None, **flaky),
        record(model="gru", seed=0, status="failed", reason="out of memory", metrics=None,
               cost=None, gradient_reach=None, curves=None, **flaky),
        record(model="gru", seed=1, metrics={"test": {"mae": 0.1}}, cost={}, **flaky),
        record(model="lstm", seed=0, metrics={"test": {"mse": 0.025}}, **flaky),
    ]
    return records


# A second invented scenario, for the fields of the tuned protocol: a pottery workshop forecasts
# kiln temperature ("kiln-heat", MSE). None of these numbers were measured.
KILN_SHA = "3f1c9a7e5b2d4c6e8f0a1b2c3d4e5f60718293a4b5c6d7e8f9a0b1c2d3e4f5a6"
KILN = {  # topology -> (options, test MSE per seed, val MSE per seed, trial scores, at bound, stop)
    "gru": ({"num_layers": 1, "dropout": 0.0}, (0.020, 0.022, 0.021), (0.019, 0.018, 0.020),
            (0.09, 0.03, 0.05, 0.021, 0.04, 0.06, 0.025, 0.08), [], "early_stop"),
    "lstm": ({"num_layers": 1, "dropout": 0.0}, (0.030, 0.026, 0.034), (0.03, 0.027, 0.031),
             (0.02, 0.2, 0.19, 0.18, 0.17, 0.21, 0.16, 0.22), ["lr"], "step_cap"),
    "hidden-feedback": ({"nonlinearity": "relu"}, (0.16, 0.15, 0.17), (0.15, 0.15, 0.16),
                        (0.3, 0.2, 0.25, 0.16, 0.18, 0.22, 0.3, 0.28), [], "early_stop"),
}


def kiln_records(sha: str = KILN_SHA) -> list[dict[str, Any]]:
    """Records of the kiln scenario with every field the tuned protocol and classical rows add."""
    records = []
    data = {"files": [{"role": "path", "path": "kiln.csv", "sha256": sha, "bytes": 9120,
                       "rows": 400}], "facts": {"rows": 400}}
    for model, (options, tests, vals, trials, at_bound, stop) in KILN.items():
        for seed in range(3):
            run_id = f"kiln-heat-{model}-s{seed}-demo"
            records.append(record(
                task="kiln-heat", model=model, seed=seed, run_id=run_id,
                config={"model": {"name": model, "options": options, "feedback": None},
                        "task": {"name": "kiln-heat", "options": {"window": 24}}, "seed": seed},
                metrics={"test": {"mse": tests[seed]}, "val": {"mse": vals[seed]}},
                tuning={"trials": 8, "completed": 8, "sampler": "tpe", "pruner": None,
                        "space": {"lr": {"low": 1e-4, "high": 0.3, "log": True}},
                        "chosen": {"lr": 0.3 if at_bound else 0.004}, "at_bound": at_bound,
                        "values": list(trials), "goal": "min", "study": f"kiln-{model}"},
                convergence={"stopped": stop if seed < 2 else "early_stop", "best_step": 700,
                             "steps": 800, "max_steps": 800},
                reproduce=f"loopzoo train model={model} task=kiln-heat seed={seed} out=OUT",
                artifact=f"runs/{run_id}/artifact",
                data=data,
            ))
    for seed in range(3):
        classical = dict(task="kiln-heat", seed=seed, kind="baseline", params=None, cost=None,
                         gradient_reach=None, curves=None, budget=None, data=data,
                         config={"task": {"name": "kiln-heat", "options": {"window": 24}}})
        records.append(record(model="seasonal-arima", run_id=f"kiln-arima-s{seed}",
                              metrics={"test": {"mse": 0.05}, "val": {"mse": 0.045}},
                              seed_dependent=False, details={"order": [2, 1, 1]}, **classical))
        records.append(record(model="ridge-lags", run_id=f"kiln-ridge-s{seed}", status="skipped",
                              reason="series too short for 48 lags (train part has 40 points)",
                              metrics={}, **classical))
        records.append(record(model="noise-floor", run_id=f"kiln-floor-s{seed}",
                              metrics={"test": {"mse": 0.004}}, **{**classical, "kind": "bound"},
                              seed_dependent=False))
    return records


def write_records(directory: Path, records: list[dict[str, Any]]) -> Path:
    """Write ``records`` as ``directory/records/<run_id>.json``; returns ``directory``."""
    folder = directory / "records"
    folder.mkdir(parents=True, exist_ok=True)
    for rec in records:
        (folder / f"{rec['run_id']}.json").write_text(json.dumps(rec, indent=2), encoding="utf-8")
    return directory


@pytest.fixture(scope="session")
def demo() -> SimpleNamespace:
    """The demo helpers for tests (pytest's importlib mode cannot import conftest directly)."""
    return SimpleNamespace(record=record, demo_records=demo_records, write_records=write_records,
                           kiln_records=kiln_records, kiln_sha=KILN_SHA)


def _demo_out(out: Path) -> Path:
    write_records(out, demo_records())
    (out / "records" / "notes.json").write_text('{"hello": "not a record"}', encoding="utf-8")
    (out / "records" / "torn.json").write_text('{"schema": "loopzoo.run/1", "run', encoding="utf-8")
    return out


@pytest.fixture
def demo_dir(tmp_path: Path) -> Path:
    """An output directory with every demo record plus two foreign files to be skipped."""
    return _demo_out(tmp_path / "out")


@pytest.fixture(scope="session")
def built_demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A demo output directory whose report was built once (read it; do not modify it)."""
    from loopzoo.report import build_report

    out = _demo_out(tmp_path_factory.mktemp("built") / "out")
    build_report(out)
    return out
