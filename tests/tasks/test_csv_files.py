"""The csv task on small files of invented scenarios: correct reading and every bad-file error.

Demo data only; the numeric checks compare against independent numpy / scikit-learn work on the
same rows.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.linear_model import LogisticRegression

import loopzoo


def listing(folder):
    return sorted(p.name for p in folder.iterdir())


def write(folder, name, text):
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def pump_rows(count, rng):
    """Demo: a water-pump station's pressure and flow per minute (invented)."""
    minutes = np.arange(count)
    flow = 30 + 5 * np.sin(minutes / 7) + rng.normal(0, 0.5, count)
    pressure = 2 + 0.05 * flow + rng.normal(0, 0.05, count)
    return ["minute,pressure_bar,flow_lpm"] + [f"{m},{p:.4f},{f:.4f}" for m, p, f in
                                               zip(minutes, pressure, flow, strict=True)]


@pytest.fixture()
def pump_csv(tmp_path):
    rng = np.random.default_rng(0)
    lines = pump_rows(200, rng)
    body = list(rng.permutation(lines[1:]))  # shuffled: the time column restores order
    return write(tmp_path, "pump.csv", "\n".join([lines[0], *body]) + "\n"), lines


def test_forecast_orders_by_time_and_matches_numpy_persistence(pump_csv):
    path, lines = pump_csv
    task = loopzoo.tasks.create("csv", path=str(path), target="flow_lpm",
                                features=["pressure_bar"], time="minute", window=10,
                                horizons=[1, 3])
    flow = np.array([float(line.split(",")[2]) for line in lines[1:]])
    facts = task.describe()
    assert facts["columns"] == ["flow_lpm", "pressure_bar"] and task.input_size == 2
    assert task.output_size == 2  # one target x two horizons
    test = facts["parts"]["test"]
    starts = np.arange(test["first_row"], test["end_row"] - 10 - 3 + 1)
    last = starts + 9
    scores = task.baselines()["persistence"].metrics
    # Independent numpy persistence on the time-ordered column.
    assert scores["mse_h1"] == pytest.approx(np.mean((flow[last + 1] - flow[last]) ** 2), rel=1e-5)
    assert scores["mse_h3"] == pytest.approx(np.mean((flow[last + 3] - flow[last]) ** 2), rel=1e-5)
    # Inputs are the time-ordered rows, standardised with training statistics.
    split = task.split("test")
    train_flow = flow[: facts["parts"]["train"]["end_row"]]
    restored = split.x[0, :, 0].double() * train_flow.std() + train_flow.mean()
    assert np.allclose(restored.numpy(), flow[starts[0] : starts[0] + 10], atol=1e-3)


def test_classification_reads_variable_length_sequences(tmp_path):
    rng = np.random.default_rng(1)
    lines, expected = ["batch,step,temp_c,outcome"], {}
    for batch in range(40):
        steps = int(rng.integers(2, 9))
        label = ["cracked", "sound"][batch % 2]
        temps = [float(v) for v in np.round(rng.normal(150 + 20 * (batch % 2), 5, steps), 2)]
        expected[f"b{batch}"] = (temps, label)
        # steps written in reverse: the time column puts them back in order
        lines += [f"b{batch},{s},{temps[s]},{label}" for s in reversed(range(steps))]
    path = write(tmp_path, "kiln.csv", "\n".join(lines) + "\n")
    with pytest.warns(UserWarning, match="rows are not in 'step' order; they are sorted"):
        task = loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome",
                                    sequence="batch", time="step", seed=2)
    facts = task.describe()
    assert facts["classes"] == ["cracked", "sound"] and facts["sequences"] == 40
    # a reversed run of n rows moves every row but the middle one of an odd n
    moved = sum(len(temps) - len(temps) % 2 for temps, _ in expected.values())
    assert facts["time"] == {"column": "step", "kind": "number",
                             "rows_out_of_order_in_file": moved}
    mean, std = facts["scaling"]["mean"][0], facts["scaling"]["std"][0]
    keys = list(expected)
    seen = 0
    for name in ("train", "val", "test"):
        split = task.split(name)
        for row, n in enumerate(split.lengths):
            temps, label = expected[keys[int(split.span[row, 0])]]
            assert n == len(temps)
            assert np.allclose(split.x[row, :n, 0].double() * std + mean, temps, atol=1e-3)
            assert split.mask[row].nonzero().item() == n - 1
            assert facts["classes"][int(split.y[row, n - 1])] == label
            seen += 1
    assert seen == 40


def test_classification_logistic_matches_sklearn(tmp_path):
    # Reference: scikit-learn LogisticRegression.score on the same flattened, padded sequences.
    rng = np.random.default_rng(3)
    lines = ["run,current_a,outcome"]
    for run in range(90):
        label = run % 3
        lines += [f"r{run},{rng.normal(label, 0.7):.3f},{label}" for _ in range(5)]
    path = write(tmp_path, "motor.csv", "\n".join(lines) + "\n")
    task = loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome", sequence="run")
    train, test = task.split("train"), task.split("test")
    model = LogisticRegression(max_iter=5000).fit(train.x.reshape(len(train), -1).numpy(),
                                                  train.y[:, -1].numpy())
    expected = model.score(test.x.reshape(len(test), -1).numpy(), test.y[:, -1].numpy())
    assert abs(task.baselines()["logistic"].metrics["accuracy"] - expected) <= 0.01


def test_logistic_handles_test_sequences_longer_than_any_training_one(tmp_path):
    lines = ["run,current_a,outcome"]
    for run in range(30):
        lines += [f"r{run},{0.1 * step + run % 2:.2f},{run % 2}" for step in range(2 + run)]
    path = write(tmp_path, "ramp.csv", "\n".join(lines) + "\n")
    for seed in range(20):
        task = loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome",
                                    sequence="run", seed=seed)
        if task.split("test").x.shape[1] > task.split("train").x.shape[1]:
            break
    else:
        pytest.fail("no seed put the longest sequence in the test part")
    assert 0 <= task.baselines()["logistic"].metrics["accuracy"] <= 1


HEADER = "minute,pressure_bar,flow_lpm\n"
BAD_FORECAST_FILES = [
    # (file content, options, error pattern)
    ("", {}, "is empty"),
    (HEADER, {}, "no data rows"),
    (HEADER + "0,2.1,30\n1,2.2\n", {}, "line 3 has 2 cells; the header has 3"),
    (HEADER + "0,2.1,30\n1,2.2,abc\n", {}, "line 3, column 'flow_lpm': 'abc' is not a number"),
    (HEADER + "0,2.1,30\n1,2.2,\n", {}, "line 3, column 'flow_lpm': missing value"),
    (HEADER + "0,2.1,30\n1,2.2,inf\n", {}, "line 3, column 'flow_lpm': 'inf' is not a finite"),
    (HEADER + "0,2.1,30\n", {"target": "flow"}, "column 'flow' .*available columns: 'minute', "
     "'pressure_bar', 'flow_lpm'"),
    (HEADER + "0,2.1,30\n", {"features": ["temp"]}, "column 'temp' \\(option features\\)"),
    (HEADER + "".join(f"{m},2.0,30\n" for m in range(30)), {"window": 10},
     "30 rows are too few .*at least 11 consecutive rows, so at least 72 rows"),
    (HEADER + "0,2.1,30\n0,2.2,31\n", {"time": "minute"}, "lines 2 and 3 have the same 'minute'"),
    ("a,a\n1,2\n", {}, "column names repeat: 'a'"),
]


@pytest.mark.parametrize("content, options, message", BAD_FORECAST_FILES)
def test_bad_forecast_files(tmp_path, content, options, message):
    path = write(tmp_path, "bad.csv", content)
    before = listing(tmp_path)
    settings = {"target": "flow_lpm", "window": 2, **options}
    with pytest.raises(ValueError, match=message):
        loopzoo.tasks.create("csv", path=str(path), **settings).split("train")
    assert listing(tmp_path) == before, "nothing is written for a bad input"


def test_minimum_rows_stated_is_exact(tmp_path):
    # The error above says 72 rows for window 10, horizon 1 and 15 % / 15 %: 72 works, 71 fails.
    for rows, works in ((72, True), (71, False)):
        path = write(tmp_path, "rows.csv", HEADER + "".join(f"{m},2.0,{m}\n" for m in range(rows)))
        if works:
            task = loopzoo.tasks.create("csv", path=str(path), target="flow_lpm", window=10)
            assert all(len(task.split(name)) >= 1 for name in ("train", "val", "test"))
        else:
            with pytest.raises(ValueError, match="at least 72 rows"):
                loopzoo.tasks.create("csv", path=str(path), target="flow_lpm", window=10)


CLASS_HEADER = "run,current_a,outcome\n"
BAD_CLASS_FILES = [
    (CLASS_HEADER + "r1,2.0,ok\nr1,2.1,nan\n", "line 3, column 'outcome': missing label"),
    (CLASS_HEADER + "r1,2.0,ok\nr1,2.1,\n", "line 3, column 'outcome': missing label"),
    (CLASS_HEADER + "r1,2.0,ok\nr1,2.1,jam\n", "sequence 'r1' has label 'ok' on line 2 but 'jam'"),
    (CLASS_HEADER + "r1,2.0,ok\nr2,x,ok\n", "line 3, column 'current_a': 'x' is not a number"),
    (CLASS_HEADER + "r1,2.0,ok\nr2,2.0,ok\n", "single class 'ok'"),
    (CLASS_HEADER + "r1,2.0,ok\nr2,2.0,jam\n", "too few"),
    # Twenty 'ok' runs and one 'jam' run: val and test would never see a jam.
    (CLASS_HEADER + "".join(f"r{i},2.0,ok\n" for i in range(20)) + "r20,3.0,jam\n",
     "class 'jam' has 1 sequence\\(s\\): too few to appear in the train, val and test parts"),
]


@pytest.mark.parametrize("content, message", BAD_CLASS_FILES)
def test_bad_classification_files(tmp_path, content, message):
    path = write(tmp_path, "bad.csv", content)
    before = listing(tmp_path)
    with pytest.raises(ValueError, match=message):
        loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome",
                             sequence="run").split("test")
    assert listing(tmp_path) == before


def test_bad_csv_options(tmp_path):
    path = write(tmp_path, "ok.csv", CLASS_HEADER + "r1,2.0,ok\n")
    with pytest.raises(FileNotFoundError, match="missing.csv"):
        loopzoo.tasks.create("csv", path=str(tmp_path / "missing.csv"), target="x")
    with pytest.raises(ValueError, match="use task 'csv-sequences'"):
        loopzoo.tasks.create("csv", path=str(path), label="outcome", sequence="run")
    with pytest.raises(ValueError, match="needs target"):
        loopzoo.tasks.create("csv", path=str(path))
    with pytest.raises(ValueError, match="needs label=<column> and sequence"):
        loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome")
    with pytest.raises(ValueError, match="unknown csv-sequences option 'target'"):
        loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome", sequence="run",
                             target="current_a")
    with pytest.raises(ValueError, match="both target and features"):
        loopzoo.tasks.create("csv", path=str(path), target="current_a", features=["current_a"])
    with pytest.raises(ValueError, match="unknown csv option 'windw'.*window"):
        loopzoo.tasks.create("csv", path=str(path), target="current_a", windw=3)
    with pytest.raises(ValueError, match="not UTF-8"):
        bad = tmp_path / "latin.csv"
        bad.write_bytes(b"run,temp\nr1,\xb0C\n")
        loopzoo.tasks.create("csv", path=str(bad), target="temp")
    assert listing(tmp_path) == ["latin.csv", "ok.csv"]


CELLS = st.sampled_from(["0", "1.5", "-2", "", "nan", "x", "1e3", "inf", " 3 ", '"4"', "a,b"])


@settings(max_examples=60, deadline=None)
@given(st.lists(st.lists(CELLS, min_size=1, max_size=4), min_size=0, max_size=30),
       st.booleans())
def test_any_file_builds_or_raises_a_clear_error(tmp_path_factory, rows, classify):
    # Fuzzed files: the only outcomes are a working task or a ValueError naming the file.
    folder = tmp_path_factory.mktemp("fuzz")
    body = "\n".join(",".join(row) for row in rows)
    path = write(folder, "fuzz.csv", "run,value,outcome\n" + body + "\n")
    try:
        if classify:
            task = loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome",
                                        sequence="run")
        else:
            task = loopzoo.tasks.create("csv", path=str(path), target="value", window=1)
        task.split("test")
    except ValueError as error:
        assert str(path) in str(error) or "line" in str(error) or "column" in str(error)
    assert listing(folder) == ["fuzz.csv"]


def test_times_continue_past_the_last_row_only_where_they_are_regular():
    """Month starts continue as pandas' own calendar arithmetic does (``pandas.date_range`` with
    the inferred frequency, the reference); equal number steps continue; anything else stops."""
    import pandas as pd

    from loopzoo.tasks._table import TimeColumn

    months = pd.date_range("2023-11-01", periods=4, freq="MS").to_numpy(dtype="datetime64[ns]")
    column = TimeColumn("month", "datetime", months, dates_only=True)
    expected = [str(t.date()) for t in pd.date_range(months[-1], periods=4, freq="MS")[1:]]
    assert column.following(np.arange(4), 3) == expected == ["2024-03-01", "2024-04-01",
                                                             "2024-05-01"]
    numbers = TimeColumn("hour", "number", np.array([3.0, 5.0, 7.0, 9.0]))
    assert numbers.following(np.arange(4), 2) == [11, 13]
    gappy = TimeColumn("hour", "number", np.array([1.0, 2.0, 4.0, 5.0]))
    assert gappy.following(np.arange(4), 2) is None
    assert numbers.following(np.arange(2), 1) is None  # too few times to call them regular
