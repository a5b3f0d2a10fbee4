"""No output-feedback metric beats what its observations allow, on every registered task.

An output-feedback network whose input weights are zero sees nothing but the values fed back to
it. Free running, that is its own earlier output: from a fixed start its outputs are the same for
every sequence, a function of the step alone. With measured values fed back, it is the targets a
deployed model has observed by then (the series-parallel model of Narendra & Parthasarathy,
"Identification and Control of Dynamical Systems Using Neural Networks", IEEE Trans. Neural
Networks 1(1), 1990), e.g. the previous symbol of a next-symbol task. So none of its reported
metrics may beat the best memoryless predictor fitted on the scored split itself from the same
information: per step (free running) or per fed-back value (measured). Before feeding back only
observed values, teacher forcing handed such a network the label of a sequence task, which it
copied (accuracy 1.0 on digits).

The run is the harness's own (``train_and_evaluate``) with teacher forcing, the setting most
prone to leaks, and selection on the measured-feedback score where it exists.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import torch

import loopzoo
from loopzoo.engine import training
from loopzoo.engine.observed_feedback import MEASURED
from loopzoo.harness.config import compose_job, composer

SMALL = {"train_size": 96, "val_size": 48, "test_size": 64}
OPTIONS = {
    "adding": {**SMALL, "length": 12},
    "copy": {**SMALL, "length": 6},
    "parity": {**SMALL, "length": 10},
    "reber": SMALL,
    "sines": {**SMALL, "length": 24, "horizons": [1, 4]},
    "fleet-log": {"lines": 200, "length": 40},
    "digits": {"read": "rows"},
    "text": {"length": 30},
}
HIGHER_IS_BETTER = {"accuracy"}
# Continuous fed-back values: the best function of them is approximated by cubic splines with
# this many knots per fed value (scikit-learn's SplineTransformer + LinearRegression), fitted on
# the scored split itself, so a trained network may come this close to it.
KNOTS = 12
CONTINUOUS_SLACK = 0.05
# The model computes in float32 and the bounds in float64: a model that reaches a bound exactly
# differs from it by float32 rounding (machine epsilon 1.2e-7, summed over a split's points).
ROUNDING_SLACK = 1e-6


def demo_files(folder: Path) -> dict[str, dict]:
    """Demo data of an invented scenario (a greenhouse's logs), not a reference set."""
    rng = np.random.default_rng(3)
    notes = folder / "greenhouse-notes.txt"
    notes.write_text("".join(f"bed {n % 5} watered {n % 7} l, vent {n % 3} open\n"
                             for n in range(90)), encoding="utf-8")
    hours = np.arange(360)
    sun = np.clip(np.sin(2 * np.pi * hours / 24), 0, None) + rng.normal(0, 0.05, hours.size)
    temperature = 18 + 8 * sun + rng.normal(0, 0.5, hours.size)
    climate = folder / "greenhouse-climate.csv"
    climate.write_text("hour,sun,temp_c\n" + "".join(
        f"{h},{s:.3f},{t:.2f}\n" for h, s, t in zip(hours, sun, temperature, strict=True)),
        encoding="utf-8")
    trays = folder / "greenhouse-trays.csv"
    lines = ["tray,day,moisture,outcome"]
    for tray in range(60):
        dry = tray % 2 == 0
        for day in range(int(rng.integers(3, 9))):
            lines.append(f"t{tray},{day},{(0.2 if dry else 0.6) + rng.normal(0, 0.1):.3f},"
                         f"{'wilted' if dry else 'fine'}")
    trays.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return {"text": {"path": str(notes)},
            "csv": {"path": str(climate), "target": "temp_c", "features": ["sun"],
                    "time": "hour", "window": 12, "horizons": [1, 3]},
            "csv-sequences": {"path": str(trays), "label": "outcome", "sequence": "tray",
                              "time": "day"}}


def _config(name: str, options: dict):
    with composer():
        return compose_job([
            f"task={name}", "model=output-feedback", "model.feedback.mode=teacher_forcing",
            "~model.feedback.schedule", "~model.feedback.k", f"protocol.feedback_select={MEASURED}",
            "protocol.trials=null", "optim.lr=0.03", "trainer.max_steps=40",
            "protocol.val_every=20", "task.batch_size=16", "trainer.enable_progress_bar=false",
            *(f"++task.options.{key}={json.dumps(value)}" for key, value in options.items()),
        ])


def _zero_input_weights(monkeypatch: pytest.MonkeyPatch) -> None:
    """Every model the harness builds starts, and stays, with input weights U = 0."""
    build = training.build_model

    def zeroed(settings, task):
        model = build(settings, task)
        with torch.no_grad():
            model.weight_ih.zero_()
        model.weight_ih.requires_grad_(False)
        return model

    monkeypatch.setattr(training, "build_model", zeroed)


def _per_step_predictions(task, split) -> list[torch.Tensor]:
    """Best outputs that depend on the step alone, fitted on the split (one value per step)."""
    mask = split.mask
    if task.kind == "classification":
        counts = torch.zeros(mask.shape[1], task.output_size, dtype=torch.float64)
        steps = torch.arange(mask.shape[1]).expand_as(mask)[mask]
        counts.index_put_((steps, split.y[mask]), torch.ones(len(steps), dtype=torch.float64),
                          accumulate=True)
        probs = counts / counts.sum(1, keepdim=True).clamp(min=1.0)
        return [torch.log(probs + 1e-300).clamp(min=-1e4).expand(len(split), -1, -1)]
    y = split.y.double().masked_fill(~mask[..., None], math.nan)
    return [torch.nan_to_num(y.nanmean(0)).expand(len(split), -1, -1),
            torch.nan_to_num(y.nanmedian(0).values).expand(len(split), -1, -1)]


def _fed_back(split, delays: tuple[int, ...]) -> tuple[torch.Tensor, torch.Tensor]:
    """Per position: the value fed back for each target (the target d steps back, 0 before
    step d) and whether one was observed yet."""
    y = split.y if split.y.dim() == 3 else split.y[..., None]
    n, t = split.mask.shape
    values = torch.zeros(n, t, len(delays), dtype=torch.float64)
    seen = torch.zeros(n, t, len(delays), dtype=torch.bool)
    for channel, d in enumerate(delays):
        if d < t:
            values[:, d:, channel] = y[:, : t - d, channel].double()
            seen[:, d:, channel] = True
    return values, seen


def _measured_predictions(task, split) -> list[torch.Tensor]:
    """Best outputs that depend on the fed-back measured values alone, fitted on the split."""
    delays = task.observed_after()
    values, seen = _fed_back(split, delays)
    mask = split.mask
    if task.kind == "classification":
        context = torch.where(seen[..., 0], values[..., 0].long(), task.output_size)
        counts = torch.zeros(task.output_size + 1, task.output_size, dtype=torch.float64)
        counts.index_put_((context[mask], split.y[mask]),
                          torch.ones(int(mask.sum()), dtype=torch.float64), accumulate=True)
        probs = counts / counts.sum(1, keepdim=True).clamp(min=1.0)
        return [torch.log(probs + 1e-300).clamp(min=-1e4)[context]]
    from sklearn.linear_model import LinearRegression
    from sklearn.preprocessing import SplineTransformer

    features = torch.cat([values, seen.double()], dim=-1)[mask].numpy()
    splines = SplineTransformer(n_knots=KNOTS, degree=3).fit(features)
    fit = LinearRegression().fit(splines.transform(features), split.y[mask].double().numpy())
    flat = torch.cat([values, seen.double()], dim=-1).reshape(-1, 2 * len(delays)).numpy()
    prediction = fit.predict(splines.transform(flat)).reshape(*mask.shape, -1)
    return [torch.as_tensor(prediction, dtype=torch.float64)]


def _best(task, split, predictions: list[torch.Tensor]) -> dict[str, float]:
    scores = [task.score(p, split) for p in predictions]
    return {name: (max if name in HIGHER_IS_BETTER else min)(s[name] for s in scores)
            for name in scores[0]}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    return demo_files(tmp_path_factory.mktemp("greenhouse"))


@pytest.mark.parametrize("name", loopzoo.tasks.available())
def test_zero_input_output_feedback_never_beats_what_it_observes(name, files, tmp_path,
                                                                 monkeypatch):
    options = {**OPTIONS.get(name, {}), **files.get(name, {})}
    _zero_input_weights(monkeypatch)
    body = training.train_and_evaluate(_config(name, options), tmp_path)
    assert body["status"] == "ok", body["reason"]
    task = loopzoo.tasks.create(name, seed=0, **options)
    measured_exists = all(d is not None for d in task.observed_after())
    assert ("test_measured_feedback" in body["metrics"]) == measured_exists
    selected = body["feedback"]["selected_on"]
    for group, metrics in body["metrics"].items():
        split = task.split("test" if group.startswith("test") else "val")
        configuration = group.partition("_")[2] or selected
        if configuration == MEASURED:
            bound, slack = _best(task, split, _measured_predictions(task, split)), (
                CONTINUOUS_SLACK if task.kind == "regression" else ROUNDING_SLACK)
        else:
            bound, slack = _best(task, split, _per_step_predictions(task, split)), ROUNDING_SLACK
        for metric, value in metrics.items():
            limit = bound[metric]
            if metric in HIGHER_IS_BETTER:
                assert value <= limit + slack, (group, metric, value, limit)
            else:
                assert value >= limit * (1 - slack) - 1e-12, (group, metric, value, limit)
