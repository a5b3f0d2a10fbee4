"""The self-contained predictor: from raw rows (training file gone) to the task's own test metric.

Each test scores a model on a task's test split the way training does (``task.score``), saves the
artifact with ``task.preprocessing()``, deletes the training file, and then, in a fresh process,
runs ``loopzoo predict`` on the raw test rows only. The metric recomputed from the written
predictions must equal the task's to a relative 1e-5. Data: open datasets that statsmodels and
scikit-learn ship (El Nino sea surface temperatures, the UCI optical digits), and the text of
PEP 20 (Tim Peters, 2004, "The Zen of Python"), which Python carries as the ``this`` module.
"""

from __future__ import annotations

import codecs
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch

import loopzoo

# The training files are written in shuffled row order on purpose (the time column orders them);
# the tasks say so with a warning.
pytestmark = pytest.mark.filterwarnings("ignore:.*rows are not in .* order:UserWarning")


def _predict(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "loopzoo.cli", "predict", *args],
                          capture_output=True, text=True, timeout=600)


def _model(task, topology="gru", seed=0):
    torch.manual_seed(seed)
    return loopzoo.create(topology, input_size=task.input_size, output_size=task.output_size,
                          hidden_size=8).eval()


def _test_score(task, model):
    test = task.split("test")
    with torch.no_grad():
        return task.score(model(test.x)[0], test)


def _elnino_csv(path: Path) -> pd.DataFrame:
    from statsmodels.datasets import elnino

    frame = elnino.load_pandas().data
    values = frame.drop(columns="YEAR").to_numpy(dtype=np.float64).reshape(-1)
    rows = pd.DataFrame({"month": np.arange(len(values)), "sst": values,
                         "season": np.tile(np.cos(np.arange(12) * np.pi / 6), len(frame))})
    rows.sample(frac=1.0, random_state=3).to_csv(path, index=False)  # the time column orders
    return rows


def _complete_origins(forecasts: pd.DataFrame) -> pd.DataFrame:
    """Forecast rows of the origins whose every horizon lies inside the data (the task's
    samples: no sample's target reaches past its part)."""
    return forecasts.groupby("origin_row").filter(lambda g: g["actual"].notna().all())


@pytest.mark.parametrize("differences", [False, True])
def test_csv_forecasts_from_the_raw_test_rows_reproduce_the_test_mse(tmp_path, differences):
    train_file = tmp_path / "sst.csv"
    rows = _elnino_csv(train_file)
    task = loopzoo.tasks.create("csv", path=str(train_file), target="sst", features=["season"],
                                time="month", window=6, horizons=[1, 3], differences=differences)
    model = _model(task)
    expected = _test_score(task, model)
    loopzoo.save(model, tmp_path / "artifact", preprocessing=task.preprocessing())
    test_start = task.describe()["parts"]["test"]["first_row"]
    rows.iloc[test_start:][::-1].to_csv(tmp_path / "test-rows.csv", index=False)
    train_file.unlink()

    done = _predict(str(tmp_path / "artifact"), str(tmp_path / "test-rows.csv"),
                    "--out", str(tmp_path / "forecasts.csv"))
    assert done.returncode == 0, done.stderr
    forecasts = pd.read_csv(tmp_path / "forecasts.csv")
    scored = _complete_origins(forecasts)
    mse = float(((scored["forecast"] - scored["actual"]) ** 2).mean())
    assert mse == pytest.approx(expected["mse"], rel=1e-5)
    per_horizon = scored.groupby("horizon").apply(
        lambda g: ((g["forecast"] - g["actual"]) ** 2).mean(), include_groups=False)
    assert per_horizon[3] == pytest.approx(expected["mse_h3"], rel=1e-5)
    # the forecasts beyond the data carry their origin time, and the time where it is known
    last = forecasts[forecasts["origin_row"] == forecasts["origin_row"].max()]
    assert last["origin_time"].tolist() == [len(rows) - 1] * 2 and last["actual"].isna().all()
    # past the last row the (evenly spaced) times continue: the step of each horizon ahead
    assert last["time"].tolist() == [len(rows), len(rows) + 2]
    assert list(forecasts.columns) == ["origin_row", "origin_time", "time", "target", "horizon",
                                       "forecast", "actual"]


def _train(*overrides: str) -> dict:
    """One harness run (``loopzoo train``); returns its record."""
    out = overrides[-1].removeprefix("out=")
    done = subprocess.run([sys.executable, "-m", "loopzoo.cli", "train", *overrides],
                          capture_output=True, text=True, timeout=1800)
    assert done.returncode == 0, done.stderr
    (record,) = [json.loads(p.read_text()) for p in (Path(out) / "records").glob("*.json")
                 if json.loads(p.read_text())["kind"] == "model"]
    assert record["status"] == "ok", record["reason"]
    return record


_QUICK = ("trainer.max_steps=20", "trainer.enable_progress_bar=false", "protocol.trials=null",
          "protocol.val_every=10")


@pytest.mark.slow
def test_a_trained_csv_run_predicts_its_record_test_mse_without_the_training_file(tmp_path):
    train_file = tmp_path / "sst.csv"
    rows = _elnino_csv(train_file)
    out = tmp_path / "runs"
    record = _train("model=gru", "task=csv", f"task.options.path={train_file}",
                    "task.options.target=sst", "++task.options.features=[season]",
                    "++task.options.time=month", "++task.options.window=6",
                    "++task.options.horizons=[1,3]", "++task.options.differences=true",
                    *_QUICK, f"out={out}")
    artifact = out / record["artifact"]
    task = loopzoo.tasks.create("csv", path=str(train_file), target="sst", features=["season"],
                                time="month", window=6, horizons=[1, 3], differences=True)
    test_start = task.describe()["parts"]["test"]["first_row"]
    rows.iloc[test_start:].to_csv(tmp_path / "test-rows.csv", index=False)
    train_file.unlink()
    done = _predict(str(artifact), str(tmp_path / "test-rows.csv"),
                    "--out", str(tmp_path / "forecasts.csv"))
    assert done.returncode == 0, done.stderr
    scored = _complete_origins(pd.read_csv(tmp_path / "forecasts.csv"))
    mse = float(((scored["forecast"] - scored["actual"]) ** 2).mean())
    assert mse == pytest.approx(record["metrics"]["test"]["mse"], rel=1e-5)


@pytest.mark.slow
def test_a_trained_text_run_predicts_its_record_bits_per_character_without_the_file(tmp_path,
                                                                                      capsys):
    text = _zen()
    capsys.readouterr()
    train_file = tmp_path / "zen.txt"
    train_file.write_bytes(text.encode("utf-8"))
    out = tmp_path / "runs"
    record = _train("model=lstm", "task=text", f"task.options.path={train_file}",
                    "++task.options.length=16", "task.batch_size=16", *_QUICK, f"out={out}")
    task = loopzoo.tasks.create("text", path=str(train_file), length=16)
    start, end = (task.describe()["parts"]["test"][k] for k in ("first_char", "end_char"))
    (tmp_path / "test.txt").write_bytes(text[start:end].encode("utf-8"))
    train_file.unlink()
    done = _predict(str(out / record["artifact"]), str(tmp_path / "test.txt"),
                    "--out", str(tmp_path / "scores.csv"))
    assert done.returncode == 0, done.stderr
    bits = pd.read_csv(tmp_path / "scores.csv", keep_default_na=False)["bits"]
    bits = pd.to_numeric(bits.replace("", np.nan))
    assert float(bits.mean()) == pytest.approx(record["metrics"]["test"]["bits_per_char"],
                                               rel=1e-5)


def _zen() -> str:
    import this  # noqa: F401  (prints the text once; it is stored ROT13-encoded)

    return codecs.decode(sys.modules["this"].s, "rot13")


def test_text_scores_from_the_raw_test_text_reproduce_bits_per_character(tmp_path, capsys):
    text = _zen()
    capsys.readouterr()
    train_file = tmp_path / "zen.txt"
    train_file.write_bytes(text.encode("utf-8"))
    task = loopzoo.tasks.create("text", path=str(train_file), length=16, val_fraction=0.1,
                                test_fraction=0.2)
    model = _model(task, "lstm")
    expected = _test_score(task, model)
    loopzoo.save(model, tmp_path / "artifact", preprocessing=task.preprocessing())
    start, end = (task.describe()["parts"]["test"][k] for k in ("first_char", "end_char"))
    (tmp_path / "test.txt").write_bytes(text[start:end].encode("utf-8"))
    train_file.unlink()

    done = _predict(str(tmp_path / "artifact"), str(tmp_path / "test.txt"),
                    "--out", str(tmp_path / "scores.csv"))
    assert done.returncode == 0, done.stderr
    scores = pd.read_csv(tmp_path / "scores.csv", keep_default_na=False,
                         dtype={"symbol": str, "next_symbol": str, "predicted": str})
    assert len(scores) == end - start
    bits = pd.to_numeric(scores["bits"].replace("", np.nan))
    assert float(bits.mean()) == pytest.approx(expected["bits_per_char"], rel=1e-5)
    assert float(bits.iloc[:-1].isna().sum()) == 0 and math.isnan(bits.iloc[-1])


def _digits_csv(path: Path, images: int = 240) -> pd.DataFrame:
    from sklearn.datasets import load_digits

    digits = load_digits()
    rows = []
    for image in range(images):
        for row in range(8):
            rows.append({"image": f"img{image}", "row": row, "digit": int(digits.target[image]),
                         **{f"p{c}": float(digits.images[image, row, c]) for c in range(8)}})
    frame = pd.DataFrame(rows)
    frame.sample(frac=1.0, random_state=5).to_csv(path, index=False)
    return frame


def test_sequence_labels_from_the_raw_test_rows_reproduce_accuracy_and_loss(tmp_path):
    train_file = tmp_path / "digits.csv"
    frame = _digits_csv(train_file)
    task = loopzoo.tasks.create("csv-sequences", path=str(train_file), label="digit",
                                sequence="image", time="row", seed=2)
    model = _model(task)
    expected = _test_score(task, model)
    loopzoo.save(model, tmp_path / "artifact", preprocessing=task.preprocessing())
    # the test part's sequences, by their number in first-appearance order of the training file
    order = list(dict.fromkeys(pd.read_csv(train_file)["image"]))
    test_ids = [order[i] for i in task.split("test").span[:, 0].tolist()]
    frame[frame["image"].isin(test_ids)].to_csv(tmp_path / "test-rows.csv", index=False)
    train_file.unlink()

    done = _predict(str(tmp_path / "artifact"), str(tmp_path / "test-rows.csv"),
                    "--out", str(tmp_path / "labels.csv"))
    assert done.returncode == 0, done.stderr
    labels = pd.read_csv(tmp_path / "labels.csv")
    truth = frame.groupby("image")["digit"].first()
    true_digit = truth[labels["sequence"]].to_numpy()
    accuracy = float((labels["label"].to_numpy() == true_digit).mean())
    picked = labels[[f"p_{d}" for d in range(10)]].to_numpy()[np.arange(len(labels)),
                                                              true_digit]
    assert accuracy == pytest.approx(expected["accuracy"], rel=1e-5)
    assert float(-np.log(picked).mean()) == pytest.approx(expected["cross_entropy"], rel=1e-5)


def test_the_python_predictor_takes_a_frame_or_an_array_and_agrees_with_the_command(tmp_path):
    rows = _elnino_csv(tmp_path / "sst.csv")
    task = loopzoo.tasks.create("csv", path=str(tmp_path / "sst.csv"), target="sst",
                                features=["season"], time="month", window=6, horizons=[2])
    loopzoo.save(_model(task), tmp_path / "artifact", preprocessing=task.preprocessing())
    predictor = loopzoo.load(tmp_path / "artifact").predictor
    recent = rows.iloc[-30:]
    from_frame = predictor.predict(recent.sample(frac=1.0, random_state=0))
    from_array = predictor.predict(recent[["sst", "season"]].to_numpy())
    np.testing.assert_array_equal(from_frame["forecast"], from_array["forecast"])
    assert len(from_frame) == 30 - 6 + 1


# -- bad input: exit 2, one paragraph naming the column or symbol, nothing written ---------------


@pytest.fixture(scope="module")
def artifacts(tmp_path_factory):
    base = tmp_path_factory.mktemp("artifacts")
    rows = _elnino_csv(base / "sst.csv")
    series = loopzoo.tasks.create("csv", path=str(base / "sst.csv"), target="sst",
                                  features=["season"], time="month", window=6, horizons=[1],
                                  differences=True)
    loopzoo.save(_model(series), base / "series", preprocessing=series.preprocessing())
    (base / "zen.txt").write_text(_zen(), encoding="utf-8")
    text = loopzoo.tasks.create("text", path=str(base / "zen.txt"), length=16)
    loopzoo.save(_model(text), base / "text", preprocessing=text.preprocessing())
    frame = _digits_csv(base / "digits.csv", images=60)
    classes = loopzoo.tasks.create("csv-sequences", path=str(base / "digits.csv"), label="digit",
                                   sequence="image", time="row")
    loopzoo.save(_model(classes), base / "classes", preprocessing=classes.preprocessing())
    return {"dir": base, "rows": rows, "digits": frame}


@pytest.fixture
def _bad(artifacts, tmp_path, capsys):
    """``_bad(artifact, data)``: the command's message; asserts exit 2 and nothing written."""
    from loopzoo.cli import main

    def run(artifact: str, data: Path) -> str:
        out = tmp_path / "predictions.csv"
        code = main(["predict", str(artifacts["dir"] / artifact), str(data), "--out", str(out)])
        captured = capsys.readouterr()
        assert code == 2, captured.err
        assert captured.out == "" and captured.err.count("\n") == 1
        assert not out.exists() and not list(tmp_path.glob(".predictions.csv*"))
        return captured.err

    return run


def test_a_missing_column_is_named_with_what_the_artifact_expects(artifacts, tmp_path, _bad):
    artifacts["rows"].drop(columns="season").to_csv(tmp_path / "x.csv", index=False)
    message = _bad("series", tmp_path / "x.csv")
    assert "column 'season' (input) is missing" in message
    assert "expects columns 'sst', 'season' and time column 'month'" in message


def test_other_column_names_are_refused_naming_the_expected_ones(artifacts, tmp_path, _bad):
    artifacts["rows"].set_axis(["t", "value", "s"], axis=1).to_csv(tmp_path / "x.csv",
                                                                   index=False)
    message = _bad("series", tmp_path / "x.csv")
    assert "column 'sst' (target) is missing" in message and "'t', 'value', 's'" in message


def test_too_few_rows_for_the_window_are_refused(artifacts, tmp_path, _bad):
    artifacts["rows"].iloc[:6].to_csv(tmp_path / "x.csv", index=False)
    message = _bad("series", tmp_path / "x.csv")
    assert "6 rows are too few" in message and "windows of 6 rows" in message
    assert "at least 7" in message


def test_a_non_numeric_cell_is_named_by_line_and_column(artifacts, tmp_path, _bad):
    rows = artifacts["rows"].astype({"sst": object})
    rows.loc[10, "sst"] = "n.a."
    rows.to_csv(tmp_path / "x.csv", index=False)
    message = _bad("series", tmp_path / "x.csv")
    assert "line 12, column 'sst': 'n.a.' is not a number" in message


def test_a_symbol_outside_the_alphabet_is_named(artifacts, tmp_path, _bad):
    (tmp_path / "x.txt").write_text("Beautiful is better than ugly. ~", encoding="utf-8")
    message = _bad("text", tmp_path / "x.txt")
    assert "symbol '~' at position 31 is not in the artifact's alphabet" in message


def test_an_unseen_class_is_named(artifacts, tmp_path, _bad):
    frame = artifacts["digits"].astype({"digit": object})
    frame.loc[frame["image"] == "img3", "digit"] = "eleven"
    frame.to_csv(tmp_path / "x.csv", index=False)
    message = _bad("classes", tmp_path / "x.csv")
    assert "class 'eleven' was not seen in training" in message and "'0', '1'" in message


def test_an_artifact_without_a_data_description_is_refused_for_files(artifacts, tmp_path, _bad):
    loopzoo.save(loopzoo.create("gru", input_size=2, output_size=1, hidden_size=3),
                 artifacts["dir"] / "plain")
    artifacts["rows"].to_csv(tmp_path / "x.csv", index=False)
    message = _bad("plain", tmp_path / "x.csv")
    assert "does not describe its data" in message


def test_a_damaged_preprocessing_field_is_refused_at_load(artifacts, tmp_path):
    import shutil

    shutil.copytree(artifacts["dir"] / "series", tmp_path / "art")
    path = tmp_path / "art" / "model.json"
    description = json.loads(path.read_text())
    description["preprocessing"]["input_scaling"]["std"] = [1.0]
    path.write_text(json.dumps(description))
    with pytest.raises(loopzoo.serve.ArtifactError,
                       match=r"preprocessing.input_scaling.std must be a list of 2"):
        loopzoo.load(tmp_path / "art")


# -- streaming as trained: the runner gives the predictor's numbers --------------------------------


def test_a_window_model_streams_with_a_rolling_window_and_matches_the_predictor(tmp_path):
    from loopzoo.serve import StreamRunner

    rows = _elnino_csv(tmp_path / "sst.csv")
    task = loopzoo.tasks.create("csv", path=str(tmp_path / "sst.csv"), target="sst",
                                features=["season"], time="month", window=6, horizons=[1, 3],
                                differences=True)
    loopzoo.save(_model(task), tmp_path / "artifact", preprocessing=task.preprocessing())
    model = loopzoo.load(tmp_path / "artifact")
    history = rows[["sst", "season"]].to_numpy()[-40:]
    expected, origins = model.predictor.forecasts(history)
    runner = StreamRunner(model)
    runner.start("buoy-1")
    runner.start("buoy-2")
    streamed = [runner.push("buoy-1", row) for row in history]
    assert streamed[:6] == [None] * 6  # 6-step windows read 7 rows when differencing
    np.testing.assert_allclose(torch.stack(streamed[6:]).numpy(), expected, rtol=1e-5)
    both = [runner.push_many({"buoy-2": row}) for row in history]
    np.testing.assert_allclose(torch.stack([b["buoy-2"] for b in both[6:]]).numpy(), expected,
                               rtol=1e-5)
    # what continuous streaming from the start would have given instead: not what was trained
    x = torch.as_tensor(task.input_scaler.transform(np.diff(history, axis=0)), dtype=torch.float32)
    with torch.no_grad():
        continuous = model(x[None])[0][0, 5:].double().numpy()
    continuous = task.scaler.inverse(torch.as_tensor(continuous)).numpy() + history[6:, :1]
    assert not np.allclose(continuous, expected, rtol=1e-3)
    assert origins.tolist() == list(range(6, 40))


def test_a_text_model_streams_in_chunks_and_matches_the_predictor(tmp_path):
    from loopzoo.serve import StreamRunner

    (tmp_path / "zen.txt").write_text(_zen(), encoding="utf-8")
    task = loopzoo.tasks.create("text", path=str(tmp_path / "zen.txt"), length=16)
    loopzoo.save(_model(task, "lstm"), tmp_path / "artifact", preprocessing=task.preprocessing())
    model = loopzoo.load(tmp_path / "artifact")
    text = _zen()[100:141]  # 41 symbols: the state restarts after symbols 16 and 32
    expected = np.exp(model.predictor.next_symbol_log_probabilities(text))
    runner = StreamRunner(model)
    runner.start("reader")
    streamed = torch.stack([runner.push("reader", symbol) for symbol in text]).numpy()
    np.testing.assert_allclose(streamed, expected, rtol=1e-5, atol=1e-7)
    with pytest.raises(ValueError, match=r"one symbol of the model's alphabet .* got '~'"):
        runner.push("reader", "~")
    with pytest.raises(ValueError, match="save_state is for models streamed continuously"):
        runner.save_state("reader")


def test_a_sequence_class_model_streams_scaled_rows_and_matches_the_predictor(tmp_path):
    from loopzoo.serve import StreamRunner

    frame = _digits_csv(tmp_path / "digits.csv", images=60)
    task = loopzoo.tasks.create("csv-sequences", path=str(tmp_path / "digits.csv"),
                                label="digit", sequence="image", time="row")
    loopzoo.save(_model(task), tmp_path / "artifact", preprocessing=task.preprocessing())
    model = loopzoo.load(tmp_path / "artifact")
    image = frame[frame["image"] == "img7"].sort_values("row")
    features = image[[f"p{c}" for c in range(8)]].to_numpy()
    expected = np.exp(model.predictor.class_log_probabilities([features]))[0]
    runner = StreamRunner(model)
    runner.start("img7")
    streamed = [runner.push("img7", row) for row in features]
    np.testing.assert_allclose(streamed[-1].numpy(), expected, rtol=1e-5, atol=1e-7)


# -- export: the graphs plus export.json's data_units serve data-unit forecasts without torch -----

_ONNX_ONLY_SERVER = r"""
import csv, json, sys
sys.modules["torch"] = None  # this server must not need torch (nor loopzoo)
sys.modules["loopzoo"] = None
import numpy as np
import onnxruntime

deploy, rows_file = sys.argv[1], sys.argv[2]
manifest = json.load(open(f"{deploy}/export.json"))
pre = manifest["data_units"]["preprocessing"]
session = onnxruntime.InferenceSession(f"{deploy}/step.onnx", providers=["CPUExecutionProvider"])
names = [i.name for i in session.get_inputs()]
states = [np.zeros((1, i.shape[1]), np.float32) for i in session.get_inputs()[1:]]
values = np.array([[float(r[c]) for c in pre["columns"]] for r in csv.DictReader(open(rows_file))])
lead = 1 if pre["differences"] else 0
mean_in, std_in = np.array(pre["input_scaling"]["mean"]), np.array(pre["input_scaling"]["std"])
mean_out, std_out = np.array(pre["output_scaling"]["mean"]), np.array(pre["output_scaling"]["std"])
targets = [pre["columns"].index(t) for t in pre["targets"]]
forecasts = []
for origin in range(pre["window"] + lead - 1, len(values)):
    rows = values[origin - pre["window"] + 1 - lead : origin + 1]
    inputs = np.diff(rows, axis=0) if pre["differences"] else rows
    x = ((inputs - mean_in) / std_in).astype(np.float32)
    state = list(states)
    for x_t in x:
        y_t, *state = session.run(None, dict(zip(names, [x_t[None], *state])))
    forecast = y_t[0].astype(np.float64) * std_out + mean_out
    if pre["differences"]:
        forecast += np.repeat(values[origin, targets], len(pre["horizons"]))
    forecasts.append(forecast.tolist())
print(json.dumps(forecasts))
"""


def test_onnxruntime_alone_serves_data_unit_forecasts_from_export_json(tmp_path):
    from loopzoo.export import main as export_main

    rows = _elnino_csv(tmp_path / "sst.csv")
    task = loopzoo.tasks.create("csv", path=str(tmp_path / "sst.csv"), target="sst",
                                features=["season"], time="month", window=6, horizons=[1, 3],
                                differences=True)
    loopzoo.save(_model(task, "lstm"), tmp_path / "artifact", preprocessing=task.preprocessing())
    # --no-check: the comparison below, in data units, is the check
    assert export_main([str(tmp_path / "artifact"), "--format", "onnx", "--graph", "step",
                        "--no-check", "--out", str(tmp_path / "deploy")]) == 0
    manifest = json.loads((tmp_path / "deploy" / "export.json").read_text())
    assert manifest["data_units"]["preprocessing"] == task.preprocessing()
    recent = rows.iloc[-20:]
    recent.to_csv(tmp_path / "recent.csv", index=False)
    done = subprocess.run([sys.executable, "-c", _ONNX_ONLY_SERVER, str(tmp_path / "deploy"),
                           str(tmp_path / "recent.csv")], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    served = np.array(json.loads(done.stdout))
    expected, _ = loopzoo.load(tmp_path / "artifact").predictor.forecasts(
        recent[["sst", "season"]].to_numpy())
    np.testing.assert_allclose(served, expected, rtol=1e-5)


def test_an_artifact_of_a_scaled_task_without_its_description_is_refused_not_served(tmp_path):
    from loopzoo.serve import PredictionError, StreamRunner

    rows = _elnino_csv(tmp_path / "sst.csv")
    options = {"path": str(tmp_path / "sst.csv"), "target": "sst", "window": 6}
    task = loopzoo.tasks.create("csv", **options)
    # as the engine wrote artifacts before they carried their preprocessing (version 1)
    loopzoo.save(_model(task), tmp_path / "old", metadata={"task": "csv", "task_options": options})
    description = json.loads((tmp_path / "old" / "model.json").read_text())
    (tmp_path / "old" / "model.json").write_text(json.dumps({**description, "version": 1}))
    model = loopzoo.load(tmp_path / "old")  # still a module
    with pytest.raises(ValueError, match="trained on task 'csv', which scales, windows"):
        StreamRunner(model)
    with pytest.raises(PredictionError, match=r"Re-save it .*loopzoo.tasks.create\('csv'"):
        model.predictor.predict(rows[["sst"]].to_numpy())
    loopzoo.save(model, tmp_path / "again", metadata={"task": "csv"})  # still undescribed
    with pytest.raises(ValueError, match="does not describe that"):
        StreamRunner(loopzoo.load(tmp_path / "again"))
    loopzoo.save(model, tmp_path / "new", preprocessing=task.preprocessing())
    renewed = loopzoo.load(tmp_path / "new")
    StreamRunner(renewed)  # described now: served as trained
    loopzoo.save(renewed, tmp_path / "copy")  # a described model keeps its description
    assert loopzoo.load(tmp_path / "copy").predictor.preprocessing == task.preprocessing()
    adding = loopzoo.create("gru", input_size=2, output_size=1, hidden_size=3)
    loopzoo.save(adding, tmp_path / "plain", metadata={"task": "adding"})
    StreamRunner(loopzoo.load(tmp_path / "plain"))  # inputs as given: nothing to describe


def test_an_out_path_under_a_file_is_refused(artifacts, tmp_path, capsys):
    from loopzoo.cli import main

    artifacts["rows"].to_csv(tmp_path / "x.csv", index=False)
    (tmp_path / "file").write_text("")
    code = main(["predict", str(artifacts["dir"] / "series"), str(tmp_path / "x.csv"),
                 "--out", str(tmp_path / "file" / "forecasts.csv")])
    assert code == 2 and "loopzoo predict:" in capsys.readouterr().err
