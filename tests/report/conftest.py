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
                              "fed_back": "distribution"}
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
    return SimpleNamespace(record=record, demo_records=demo_records, write_records=write_records)


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
