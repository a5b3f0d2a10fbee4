"""The task contract (README and DEVELOPERS.md "Tasks"), driven by the registry.

A newly registered task is covered here without new test code; tasks that read a user's file get
one written by the fixture below.
"""

import json

import numpy as np
import pytest
import torch

import loopzoo
from loopzoo.tasks import SPLITS

SMALL = {"train_size": 60, "val_size": 20, "test_size": 30}
# Options that keep each task small in this file; tasks missing here run with their defaults.
OPTIONS = {
    "adding": {**SMALL, "length": 20},
    "copy": {**SMALL, "length": 10},
    "parity": {**SMALL, "length": 12},
    "reber": SMALL,
    "sines": {**SMALL, "length": 30},
    "fleet-log": {"lines": 200, "length": 40},
    "text": {"length": 30},
}




def build(name, seed, files):
    return loopzoo.tasks.create(name, seed=seed, **OPTIONS.get(name, {}), **files.get(name, {}))


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Options pointing the file-reading tasks at small files of a demo scenario."""
    folder = tmp_path_factory.mktemp("user-files")
    return user_files(folder)


def user_files(folder):
    # Demo data of an invented scenario (a night-shift bakery's oven notes), not a reference set.
    notes = folder / "oven-notes.txt"
    notes.write_text("".join(f"oven {n % 4} at {180 + n % 40} C, tray {n % 9} out at {n % 60:02d}\n"
                             for n in range(80)), encoding="utf-8")
    return {"text": {"path": str(notes)},
            "csv": {"path": str(write_heat_load(folder)), "target": "load_mw",
                    "features": ["outdoor_c"], "time": "hour", "window": 24, "horizons": [1, 6]},
            "csv-sequences": {"path": str(write_conveyor_runs(folder)), "label": "outcome",
                              "sequence": "run", "time": "second"}}


def write_heat_load(folder):
    """Demo: hourly load of an invented district-heating plant, rows shuffled (time sorts them)."""
    rng = np.random.default_rng(7)
    hours = np.arange(400)
    outdoor = 5 + 6 * np.sin(2 * np.pi * hours / 24) + rng.normal(0, 1, hours.size)
    load = 40 - 1.5 * outdoor + rng.normal(0, 2, hours.size)
    lines = ["hour,outdoor_c,load_mw"] + [f"{h},{o:.2f},{v:.2f}" for h, o, v in
                                          zip(hours, outdoor, load, strict=True)]
    path = folder / "heat-load.csv"
    path.write_text("\n".join([lines[0], *rng.permutation(lines[1:])]) + "\n", encoding="utf-8")
    return path


def write_conveyor_runs(folder):
    """Demo: variable-length sensor runs of an invented conveyor, each labelled ok or jam."""
    rng = np.random.default_rng(8)
    lines = ["run,second,current_a,speed_ms,outcome"]
    for run in range(60):
        jam = run % 3 == 0
        for second in range(int(rng.integers(3, 12))):
            current = 2 + (0.3 * second if jam else 0) + rng.normal(0, 0.2)
            lines.append(f"r{run},{second},{current:.3f},{rng.uniform(0.8, 1.2):.3f},"
                         f"{'jam' if jam else 'ok'}")
    path = folder / "conveyor-runs.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture(scope="module", params=loopzoo.tasks.available())
def task_pair(request, files):
    name = request.param
    return build(name, 0, files), build(name, 0, files), build(name, 1, files)


def test_attributes(task_pair):
    task = task_pair[0]
    assert task.name in loopzoo.tasks.available()
    # The registered class carries the kind and option fields (the harness reads them unbuilt).
    registered = loopzoo.tasks.TASKS.get(task.name)
    assert registered.kind == task.kind and registered.metric == task.metric
    assert isinstance(task.options, registered.Options)
    assert task.kind in ("regression", "classification")
    assert task.goal in ("min", "max")
    assert isinstance(task.input_size, int) and task.input_size >= 1
    assert isinstance(task.output_size, int) and task.output_size >= 1
    if task.kind == "classification":
        assert task.output_size >= 2


def test_shapes_dtypes_and_masks(task_pair):
    task = task_pair[0]
    for name in SPLITS:
        split = task.split(name)
        n, t = split.mask.shape
        assert n >= 1 and t >= 1
        assert split.x.shape == (n, t, task.input_size) and split.x.dtype == torch.float32
        if task.kind == "regression":
            assert split.y.shape == (n, t, task.output_size) and split.y.dtype == torch.float32
            assert torch.isfinite(split.y).all()
        else:
            assert split.y.shape == (n, t) and split.y.dtype == torch.int64
            assert split.y.min() >= 0 and split.y.max() < task.output_size
        assert torch.isfinite(split.x).all()
        assert split.mask.dtype == torch.bool
        assert split.lengths.shape == (n,) and split.lengths.dtype == torch.int64
        assert split.lengths.min() >= 1 and split.lengths.max() <= t
        steps = torch.arange(t)[None, :]
        padding = steps >= split.lengths[:, None]
        assert not split.mask[padding].any(), "padding positions must never be scored"
        assert (split.x[padding] == 0).all(), "padding inputs must be zeros"
        assert split.mask.any(dim=1).all(), "every sequence needs a scored position"
        assert task.split(name) is split, "splits are cached"


def test_same_seed_same_data_and_other_seed_other_data(task_pair):
    task, twin, other = task_pair
    for name in SPLITS:
        a, b, c = task.split(name), twin.split(name), other.split(name)
        for field in ("x", "y", "mask", "lengths", "span"):
            assert torch.equal(getattr(a, field), getattr(b, field)), (name, field)
        same = a.x.shape == c.x.shape and torch.equal(a.x, c.x) and torch.equal(a.y, c.y)
        if task.seed_changes_data:
            assert not same, f"seed 1 gave the same {name} data as seed 0"
        else:
            # Chronological splits of a fixed record: the seed only seeds the models.
            assert same


def test_no_leakage_between_splits(task_pair):
    task = task_pair[0]
    spans = {name: task.split(name).span for name in SPLITS}
    for name, span in spans.items():
        assert (span[:, 0] <= span[:, 1]).all(), name
    for i, first in enumerate(SPLITS):
        for second in SPLITS[i + 1 :]:
            a, b = spans[first], spans[second]
            if task.seed_changes_data:
                overlap = np.intersect1d(a[:, 0].numpy(), b[:, 0].numpy())
                assert overlap.size == 0, (first, second, overlap[:5])
            else:
                # Chronological: every index of a later split comes after the earlier split's.
                assert a[:, 1].max() < b[:, 0].min(), (first, second)
    if task.kind == "regression":
        # Real-valued inputs never repeat by chance, so a shared input sequence means leakage.
        rows = {name: {x.numpy().tobytes() for x in task.split(name).x} for name in SPLITS}
        assert not rows["train"] & rows["test"] and not rows["train"] & rows["val"]


def test_score_has_primary_metric_and_baselines_share_keys(task_pair):
    task = task_pair[0]
    test = task.split("test")
    if task.kind == "regression":
        prediction = torch.zeros(*test.y.shape)
    else:
        prediction = torch.zeros(*test.y.shape, task.output_size)
    scores = task.score(prediction, test)
    assert task.metric in scores
    assert all(np.isfinite(v) for v in scores.values())
    assert task.score(prediction, "test") == scores
    baselines = task.baselines()
    assert baselines, "every task has at least one classical baseline"
    assert all(row.kind == "baseline" for row in baselines.values())
    assert all(row.kind in ("bound", "reference") for row in task.bounds().values())
    assert not set(baselines) & set(task.bounds()), "a row is a baseline or a bound, not both"
    for name, row in {**baselines, **task.bounds()}.items():
        json.dumps(row.details, allow_nan=False)
        if row.status == "skipped":
            assert row.reason and not row.metrics, name
            continue
        # a reference rate (a compressor's) has no predictions, so only its rate metrics
        expected = set(scores) if row.kind != "reference" else set(row.metrics)
        assert set(row.metrics) == expected and task.metric in row.metrics, name
        assert all(np.isfinite(v) for v in row.metrics.values()), name
        if not task.seed_changes_data:
            assert not row.seed_dependent, name


def test_describe_is_json(task_pair):
    task = task_pair[0]
    facts = task.describe()
    json.dumps(facts, allow_nan=False)
    assert facts["name"] == task.name and facts["seed"] == 0
    assert set(facts["splits"]) == set(SPLITS)


def test_score_rejects_wrong_shapes_and_nan(task_pair):
    task = task_pair[0]
    test = task.split("test")
    shape = (*test.mask.shape, task.output_size)
    with pytest.raises(ValueError, match="shape"):
        task.score(torch.zeros(shape[0], shape[1], shape[2] + 1), test)
    bad = torch.zeros(shape)
    bad[test.mask] = float("nan")
    with pytest.raises(ValueError, match="non-finite"):
        task.score(bad, test)


def test_impossible_sizes_are_refused():
    with pytest.raises(ValueError, match="would hold about .* values .*limit"):
        loopzoo.tasks.create("adding", length=100_000, train_size=100_000)
    with pytest.raises(ValueError, match=r"train_size = 0 is invalid; accepted: an integer in"):
        loopzoo.tasks.create("copy", train_size=0)
    with pytest.raises(ValueError, match="length = 2.5 is invalid; accepted: an integer"):
        loopzoo.tasks.create("parity", length=2.5)


def test_unknown_names_and_options_are_rejected():
    with pytest.raises(ValueError, match="available: .*adding"):
        loopzoo.tasks.create("addding")
    with pytest.raises(ValueError, match="lenght.*length"):
        loopzoo.tasks.create("adding", lenght=10)
    with pytest.raises(ValueError, match="split"):
        loopzoo.tasks.create("adding", **SMALL).split("training")
    with pytest.raises(ValueError, match="seed"):
        loopzoo.tasks.create("adding", seed=-1)


def test_observability_is_declared_per_target_and_true_of_the_data(task_pair):
    """A target declared observed after d steps is revealed by the inputs up to d steps later
    (what a series-parallel model may feed back, Narendra & Parthasarathy 1990)."""
    task = task_pair[0]
    delays = task.observed_after()
    assert len(delays) == (task.output_size if task.kind == "regression" else 1)
    assert all(d is None or (isinstance(d, int) and d >= 1) for d in delays)
    assert task.observability() == task.describe()["observable"]
    # The class attribute the harness reads without building the task says the same.
    assert type(task).targets_observed == all(d is not None for d in delays)
    split = task.split("train")
    steps = split.mask.shape[1]
    for channel, delay in enumerate(delays):
        if delay is None or delay >= steps:
            continue
        if task.kind == "classification":
            # The class at t is a function of the input at t + d (the symbol read then).
            valid = torch.arange(steps - delay)[None, :] + delay < split.lengths[:, None]
            seen = split.x[:, delay:][valid]
            targets = split.y[:, : steps - delay][valid]
            table = {}
            for row, target in zip(seen.numpy(), targets.numpy(), strict=True):
                assert table.setdefault(row.tobytes(), int(target)) == int(target)
            continue
        # Real targets: an affine function of the inputs up to step t + d (least squares).
        t = steps - 1 - delay
        features = split.x[:, : t + delay + 1].reshape(len(split), -1).double()
        design = torch.cat([features, torch.ones(len(split), 1, dtype=torch.float64)], dim=1)
        target = split.y[:, t, channel].double()
        assert design.shape[0] > design.shape[1], "too few sequences for the check"
        solution = torch.linalg.lstsq(design, target[:, None]).solution
        residual = target - (design @ solution)[:, 0]
        assert residual.var() <= 1e-8 * max(target.var().item(), 1e-12), (channel, delay)
