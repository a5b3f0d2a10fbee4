"""Issue 15 ("Hardening") replayed line by line, the way a user meets each defect.

Command-line lines run the installed ``loopzoo`` command in a subprocess and hold it to the
README's promise: bad input exits 2 with one paragraph, never a traceback, and no result file is
half written or left behind. Python-API lines check the exact message: what is wrong, where, and
what is accepted. Test ids name the issue line (``line-4-out-is-a-file``) and each replay's
docstring quotes it. Whatever launches the command (training, sweeps, kills) is marked slow.
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest
import torch
from support.limits import LOAD_BOUND_MB

import loopzoo
from loopzoo.serve.streaming import StreamRunner

LOOPZOO = Path(sys.executable).with_name("loopzoo")  # the installed console script
SMALL = ["task.batch_size=8", "task.budget=300", "trainer.max_steps=2", "protocol.val_every=1",
         "protocol.trials=null", "trainer.enable_progress_bar=false"]
TINY = ["task=adding", "task.options.length=5", "task.options.train_size=16",
        "task.options.val_size=8", "task.options.test_size=8", *SMALL]
SIZES = {"input_size": 3, "output_size": 2, "hidden_size": 4}
CLASS_HEADER = "run,current_a,outcome\n"


def write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def kw_csv(folder: Path, cell: str) -> Path:
    """Demo: 300 meter readings ``kw`` at times ``t`` 0..299; line 125's time is ``cell``."""
    rows = "".join(f"{cell if t == 123 else t},{t % 17}\n" for t in range(300))
    return write(folder / "kw.csv", "t,kw\n" + rows)


def one_class_csv(folder: Path) -> Path:
    """Demo: 30 motor runs, every one labelled ``ok``."""
    return write(folder / "motor.csv", CLASS_HEADER + "".join(f"r{i},2.0,ok\n" for i in range(30)))


def lone_jam_csv(folder: Path) -> Path:
    """Demo: 20 motor runs labelled ``ok`` and a single one labelled ``jam``."""
    rows = "".join(f"r{i},2.0,ok\n" for i in range(20)) + "r20,3.0,jam\n"
    return write(folder / "motor.csv", CLASS_HEADER + rows)


def inflated_artifact(folder: Path) -> Path:
    """A small hidden-feedback artifact whose model.json claims hidden_size 30000."""
    artifact = loopzoo.save(loopzoo.create("hidden-feedback", input_size=3, output_size=2,
                                           hidden_size=6), folder / "artifact")
    description = json.loads((artifact / "model.json").read_text())
    description["options"]["hidden_size"] = 30000
    write(artifact / "model.json", json.dumps(description))
    return artifact


def message_of(call: Callable[..., object], *args: object, error: type[Exception] = ValueError,
               **kwargs: object) -> str:
    """The message ``call(*args, **kwargs)`` refuses with; it must raise ``error``."""
    with pytest.raises(error) as refused:
        call(*args, **kwargs)
    return str(refused.value)


# Python API -----------------------------------------------------------------------------------


def replay_time_column_with_text(tmp: Path) -> None:
    """Line 1: "a CSV `time` column with one non-numeric cell sorts every time as text"."""
    path = kw_csv(tmp, "x")
    assert message_of(loopzoo.tasks.create, "csv", path=str(path), target="kw", time="t") == (
        f"{path}: line 125, column 't': 'x' is not a number like the 299 other times of the "
        "column; a time column holds numbers, or ISO 8601 dates or timestamps (YYYY-MM-DD, "
        "optionally with Thh:mm[:ss] and a zone), all of one kind")
    # With the cell a number again the times sort as numbers (0, 1, 2, ...), not as text.
    parts = loopzoo.tasks.create("csv", path=str(kw_csv(tmp, "123")), target="kw",
                                 time="t").describe()["parts"]
    assert [(p["first_time"], p["last_time"]) for p in parts.values()] == [
        (0, 209), (210, 254), (255, 299)]


def replay_step_nan_input(tmp: Path) -> None:
    """Line 10: "`step()` accepts a NaN input (the sequence input is refused; be consistent)"."""
    for name in loopzoo.available():
        model = loopzoo.create(name, **SIZES)
        x = torch.randn(2, 5, 3)
        x[1, 2, 0] = math.nan
        tail = "contains 1 non-finite value(s) (NaN or inf); clean the data"
        assert message_of(model, x) == f"x {tail}", name
        assert message_of(model.step, x[:, 2], model.init_state(2)) == f"x_t {tail}", name


def replay_forward_nan_state(tmp: Path) -> None:
    """Line 10: "`forward` [accepts] a NaN state"."""
    for name in loopzoo.available():
        model = loopzoo.create(name, **SIZES)
        state = model.init_state(2)
        poisoned = (torch.full_like(state[0], math.nan), *state[1:])
        expected = (f"state[0] contains {state[0].numel()} non-finite value(s) (NaN or inf); "
                    "clean the data")
        assert message_of(model, torch.randn(2, 5, 3), poisoned) == expected, name
        assert message_of(model.step, torch.randn(2, 3), poisoned) == expected, name


def replay_hidden_size_beyond_memory(tmp: Path) -> None:
    """Line 10: "`create('lstm', …, hidden_size=10**9)` gives a raw torch overflow error"."""
    advice = ("do not fit in memory; choose smaller sizes (loopzoo.width_for_budget finds a "
              "hidden_size for a parameter budget)")
    assert message_of(loopzoo.create, "lstm", input_size=3, output_size=2, hidden_size=10**9) == (
        "cannot build 'lstm' with input_size=3, output_size=2, hidden_size=1000000000: its "
        f"parameters (more bytes than a 64-bit size can count) {advice}")
    # the same message as a size that is merely too large
    assert message_of(loopzoo.create, "lstm", input_size=3, output_size=2,
                      hidden_size=10**7).endswith(advice)


def replay_classes_with_one_output(tmp: Path) -> None:
    """Line 10: "`output_kind='classes'` with `output_size=1` is accepted"."""
    assert message_of(loopzoo.create, "output-feedback", input_size=3, output_size=1,
                      hidden_size=4, output_kind="classes") == (
        "'output-feedback' with output_kind='classes' needs output_size >= 2 (one logit per "
        "class), got output_size=1; use output_kind='real' for one real output")


def replay_one_class_file(tmp: Path) -> None:
    """Line 10: "a classification file with one class is accepted"."""
    path = one_class_csv(tmp)
    assert message_of(loopzoo.tasks.create, "csv-sequences", path=str(path), label="outcome",
                      sequence="run") == (
        f"{path}: column 'outcome' has a single class 'ok'; classification needs at least 2")


def replay_class_with_one_sequence(tmp: Path) -> None:
    """Line 10: "a class with a single sequence leaves val and test without it"."""
    path = lone_jam_csv(tmp)
    task = loopzoo.tasks.create("csv-sequences", path=str(path), label="outcome", sequence="run")
    assert message_of(task.split, "test") == (
        f"{path}: class 'jam' has 1 sequence(s): too few to appear in the train, val and test "
        "parts at val_fraction=0.2 and test_fraction=0.2; add sequences of it or drop the class")


def replay_push_text_sample(tmp: Path) -> None:
    """Line 10: "the streaming runner's `push(id, "abc")` gives a torch TypeError that does not
    name the stream"."""
    runner = StreamRunner(loopzoo.create("gru", **SIZES).eval())
    runner.start("pump-7")
    expected = "must be 3 numbers (a tensor, array or list), got str 'abc'"
    assert message_of(runner.push, "pump-7", "abc", error=TypeError) == (
        f"sample for stream 'pump-7' {expected}")
    assert message_of(runner.push_many, {"pump-7": "abc"}, error=TypeError) == (
        f"samples['pump-7'] {expected}")


@pytest.mark.parametrize("replay", [
    pytest.param(replay_time_column_with_text, id="line-1-time-column-with-text"),
    pytest.param(replay_step_nan_input, id="line-10-step-nan-input"),
    pytest.param(replay_forward_nan_state, id="line-10-forward-nan-state"),
    pytest.param(replay_hidden_size_beyond_memory, id="line-10-hidden-size-beyond-memory"),
    pytest.param(replay_classes_with_one_output, id="line-10-classes-with-one-output"),
    pytest.param(replay_one_class_file, id="line-10-one-class-file"),
    pytest.param(replay_class_with_one_sequence, id="line-10-class-with-one-sequence"),
    pytest.param(replay_push_text_sample, id="line-10-push-text-sample"),
])
def test_python_api(replay: Callable[[Path], None], tmp_path: Path) -> None:
    """Each replay refuses the bad input with the exact message (its docstring quotes the line)."""
    replay(tmp_path)


def inflate_options_and_tensors(tmp: Path) -> Path:
    """The inflated artifact with a ``tensors`` field that agrees with its options."""
    artifact = inflated_artifact(tmp)
    description = json.loads((artifact / "model.json").read_text())
    with torch.device("meta"):
        huge = loopzoo.create("hidden-feedback", **description["options"])
    description["tensors"] = {n: {"shape": list(t.shape), "dtype": "float32"}
                              for n, t in huge.state_dict().items()}
    write(artifact / "model.json", json.dumps(description))
    return artifact


def inflate_checkpoint(tmp: Path) -> Path:
    """A checkpoint of a small hidden-feedback model whose options claim hidden_size 40000."""
    model = loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=6)
    path = tmp / "model.ckpt"
    torch.save({"state_dict": model.state_dict(),
                "loopzoo": {"topology": "hidden-feedback",
                            "options": {**model.options, "hidden_size": 40000}}}, path)
    return path


@pytest.mark.parametrize(("inflate", "expected"), [
    pytest.param(inflated_artifact, "{path}/weights.safetensors (header): tensor 'cell.weight_ih' "
                 "is float32[6, 3]; topology 'hidden-feedback' with the options in model.json "
                 "expects float32[30000, 3]", id="line-2-model-json-hidden-size"),
    pytest.param(inflate_options_and_tensors, "{path}/weights.safetensors (header): tensor "
                 "'cell.weight_ih' is float32[6, 3]; {path}/model.json field 'tensors' expects "
                 "float32[30000, 3]", id="line-2-model-json-tensors-field"),
    pytest.param(inflate_checkpoint, "{path}: tensor 'cell.weight_ih' is float32[6, 3]; topology "
                 "'hidden-feedback' with its options expects float32[40000, 3]",
                 id="line-2-checkpoint-hidden-size"),
])
def test_line_2_sizes_are_checked_before_anything_is_built(
        inflate: Callable[[Path], Path], expected: str, tmp_path: Path,
        fresh_load: Callable[[Path], tuple[str, int]]) -> None:
    """Line 2: "`hidden_size: 30000` in a saved artifact's `model.json` makes `loopzoo.load`
    take 3.7 GB and 10 s before it refuses the file"; "the `tensors` field is never checked"."""
    path = inflate(tmp_path)
    message, extra_mb = fresh_load(path)
    assert message == expected.format(path=path)
    assert extra_mb < LOAD_BOUND_MB, f"loading took {extra_mb} MB more than importing loopzoo"


# The command line -----------------------------------------------------------------------------


@dataclass(frozen=True)
class Refusal:
    """A command that must be refused, the texts its one paragraph must hold, and the folder it
    must leave as it was (lock files aside)."""

    argv: list[str]
    expected: tuple[str, ...]
    folder: Path


def command(*argv: str) -> list[str]:
    return [str(LOOPZOO), *argv]


def run(argv: list[str], cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(argv, capture_output=True, text=True, cwd=cwd, timeout=900)


def assert_refused(result: subprocess.CompletedProcess[str], *expected: str) -> None:
    """The README's promise: exit 2 and one paragraph naming ``expected``, no traceback."""
    shown = f"stdout:\n{result.stdout}\nstderr:\n{result.stderr}"
    assert "Traceback" not in shown, shown
    assert result.returncode == 2, shown
    assert len(result.stderr.strip().splitlines()) == 1, shown
    for text in expected:
        assert text in result.stderr, shown


def contents(folder: Path) -> dict[Path, bytes]:
    return {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def assert_whole(folder: Path) -> None:
    """No temporary file of an interrupted write, and every JSON file parses."""
    for path, data in contents(folder).items():
        assert not path.name.endswith(".tmp"), path
        if path.suffix == ".json":
            json.loads(data)


def assert_left_as_it_was(folder: Path, before: dict[Path, bytes]) -> None:
    """Every file there before is unchanged and the new ones are lock files only."""
    after = contents(folder)
    assert {p: after.get(p) for p in before} == before
    new = [p for p in set(after) - set(before) if not (".state" in p.parts and p.suffix == ".lock")]
    assert not new, f"left behind: {sorted(map(str, new))}"
    assert_whole(folder)


PRIVATE_MOUNTS = ["unshare", "--mount", "--map-root-user"]
# A full 1 MB disk at $2 holding a copy of folder $1; what the command leaves is copied back.
FULL_DISK = """folder=$1 disk=$2; shift 2
mount -t tmpfs -o size=1m tmpfs "$disk" || exit 97
cp -a "$folder/." "$disk"
cat /dev/zero > "$disk/.filler" 2>/dev/null
"$@"; code=$?
rm "$disk/.filler"; cp -a "$disk/." "$folder"
exit $code
"""
READ_ONLY = """folder=$1; shift
mount --bind "$folder" "$folder" && mount -o remount,bind,ro "$folder" || exit 97
exec "$@"
"""


@functools.cache
def private_mounts() -> bool:
    """Whether this machine lets a process mount a disk of its own (``unshare``)."""
    probe = [*PRIVATE_MOUNTS, "mount", "-t", "tmpfs", "tmpfs", tempfile.gettempdir()]
    try:
        return subprocess.run(probe, capture_output=True, timeout=60).returncode == 0
    except FileNotFoundError:
        return False


def on_own_disk(script: str, *argv: str) -> list[str]:
    """``argv`` run by ``script`` in a private mount namespace: the machine's disks are never
    touched. Skips the test where no such namespace can be made."""
    if not private_mounts():
        pytest.skip("needs a private mount namespace (unshare --mount --map-root-user)")
    return [*PRIVATE_MOUNTS, "sh", "-c", script, "sh", *argv]


def time_column_with_text(tmp: Path) -> Refusal:
    """Line 1: "a CSV `time` column with one non-numeric cell" (through `loopzoo train`)."""
    path = kw_csv(tmp, "x")
    argv = command("train", "model=gru", "task=csv", f"task.options.path={path}",
                   "task.options.target=kw", "task.options.time=t", *SMALL, f"out={tmp / 'out'}")
    return Refusal(argv, ("line 125, column 't': 'x' is not a number like the 299 other times",),
                   tmp)


def export_of_an_inflated_artifact(tmp: Path) -> Refusal:
    """Line 2: "`hidden_size: 30000` in a saved artifact's `model.json`" (through `export`)."""
    artifact = inflated_artifact(tmp)
    argv = command("export", str(artifact), "--format", "onnx", "--out", str(tmp / "graphs"))
    return Refusal(argv, ("with the options in model.json expects float32[30000, 3]",), tmp)


def suite_path(tmp: Path) -> Refusal:
    """Line 3: "`loopzoo train 'suite=../../../../some/dir/evil'` loads a YAML file from outside
    the package"."""
    evil = tmp / "some" / "dir" / "suite" / "evil.yaml"
    evil.parent.mkdir(parents=True)
    write(evil, "# @package _global_\nsuite: quick\ntrainer:\n  max_steps: 1\n")
    choice = "../" * 12 + str(evil.with_suffix("")).lstrip("/")
    argv = command("train", f"suite={choice}", *TINY, f"out={tmp / 'out'}")
    return Refusal(argv, (f"unknown suite '{choice}'; available: forecasting, long-lag, quick",),
                   tmp)


def task_path(tmp: Path) -> Refusal:
    """Line 3: "`task=../../x` gives a traceback"."""
    return Refusal(command("train", "task=../../x", f"out={tmp / 'out'}"),
                   ("unknown task '../../x'; available: adding",), tmp)


def out_is_a_file(tmp: Path) -> Refusal:
    """Line 4: "`out=` an existing file"."""
    notes = write(tmp / "notes.txt", "keep me\n")
    return Refusal(command("train", "model=gru", *TINY, f"out={notes}"),
                   (f"out '{notes}' is a file; it must name a folder",), tmp)


def out_under_a_file(tmp: Path) -> Refusal:
    """Line 4: "`out=` … a path under a file"."""
    notes = write(tmp / "notes.txt", "keep me\n")
    return Refusal(command("sweep", "model=gru,lstm", *TINY, f"out={notes / 'runs'}"),
                   ("is a file, so no folder can be made under it",), tmp)


def read_only_out(tmp: Path) -> Refusal:
    """Line 4: "a read-only `out`"."""
    locked = tmp / "locked"
    locked.mkdir()
    argv = on_own_disk(READ_ONLY, str(locked),
                       *command("train", "model=gru", *TINY, f"out={locked / 'runs'}"))
    return Refusal(argv, ("is not writable by this user",), tmp)


def no_workers(tmp: Path) -> Refusal:
    """Line 4: "`hydra.launcher.n_jobs=0`"."""
    argv = command("sweep", "model=gru,lstm", *TINY, "hydra.launcher.n_jobs=0", f"out={tmp / 'o'}")
    return Refusal(argv, ("hydra.launcher.n_jobs = 0 is invalid; accepted: a positive number",),
                   tmp)


def full_disk_during_train(tmp: Path) -> Refusal:
    """Line 4: "a full disk during `train`"."""
    (tmp / "disk").mkdir()
    (tmp / "kept").mkdir()
    argv = on_own_disk(FULL_DISK, str(tmp / "kept"), str(tmp / "disk"),
                       *command("train", "model=gru", *TINY, f"out={tmp / 'disk' / 'out'}"))
    return Refusal(argv, ("No space left on device", "the disk is full: free some space"),
                   tmp / "kept")


def full_disk_during_report(tmp: Path) -> Refusal:
    """Line 4: "a full disk during … `report`"."""
    (tmp / "disk").mkdir()
    trained = run(command("train", "model=gru", *TINY, f"out={tmp / 'kept'}"), tmp)
    assert trained.returncode == 0, trained.stderr
    argv = on_own_disk(FULL_DISK, str(tmp / "kept"), str(tmp / "disk"),
                       *command("report", str(tmp / "disk")))
    return Refusal(argv, ("No space left on device",), tmp / "kept")


def export_under_a_file(tmp: Path) -> Refusal:
    """Line 4: "`export --out file/x`"."""
    artifact = loopzoo.save(loopzoo.create("gru", **SIZES), tmp / "artifact")
    notes = write(tmp / "notes.txt", "keep me\n")
    argv = command("export", str(artifact), "--format", "onnx", "--out", str(notes / "x"))
    return Refusal(argv, ("is a file, so no folder can be made under it",), tmp)


def missing_input_file(tmp: Path) -> Refusal:
    """Line 5: "A missing input file becomes a `failed` record (exit 1)"."""
    argv = command("train", "model=gru", "task=csv", f"task.options.path={tmp / 'nowhere.csv'}",
                   "task.options.target=kw", *SMALL, f"out={tmp / 'out'}")
    return Refusal(argv, ("task.options.path", "nowhere.csv' does not exist"), tmp)


def missing_input_file_in_a_sweep(tmp: Path) -> Refusal:
    """Line 5: "A missing input file becomes a `failed` record … that every rerun retries"."""
    argv = command("sweep", "model=gru,lstm", "task=csv",
                   f"task.options.path={tmp / 'nowhere.csv'}", "task.options.target=kw", *SMALL,
                   f"out={tmp / 'out'}")
    return Refusal(argv, ("nowhere.csv' does not exist",), tmp)


def one_class_file(tmp: Path) -> Refusal:
    """Line 10: "a classification file with one class is accepted" (through `loopzoo train`)."""
    argv = command("train", "model=gru", "task=csv-sequences",
                   f"task.options.path={one_class_csv(tmp)}", "task.options.label=outcome",
                   "task.options.sequence=run", *SMALL, f"out={tmp / 'out'}")
    return Refusal(argv, ("column 'outcome' has a single class 'ok'",), tmp)


def class_with_one_sequence(tmp: Path) -> Refusal:
    """Line 10: "a class with a single sequence leaves val and test without it" (through
    `loopzoo train`)."""
    argv = command("train", "model=gru", "task=csv-sequences",
                   f"task.options.path={lone_jam_csv(tmp)}", "task.options.label=outcome",
                   "task.options.sequence=run", *SMALL, f"out={tmp / 'out'}")
    return Refusal(argv, ("class 'jam' has 1 sequence(s): too few to appear in the train, val "
                          "and test parts",), tmp)


@pytest.mark.slow
@pytest.mark.parametrize("case", [
    pytest.param(time_column_with_text, id="line-1-time-column-with-text"),
    pytest.param(export_of_an_inflated_artifact, id="line-2-export-of-an-inflated-artifact"),
    pytest.param(suite_path, id="line-3-suite-path"),
    pytest.param(task_path, id="line-3-task-path"),
    pytest.param(out_is_a_file, id="line-4-out-is-a-file"),
    pytest.param(out_under_a_file, id="line-4-out-under-a-file"),
    pytest.param(read_only_out, id="line-4-read-only-out"),
    pytest.param(no_workers, id="line-4-n-jobs-0"),
    pytest.param(full_disk_during_train, id="line-4-full-disk-during-train"),
    pytest.param(full_disk_during_report, id="line-4-full-disk-during-report"),
    pytest.param(export_under_a_file, id="line-4-export-out-under-a-file"),
    pytest.param(missing_input_file, id="line-5-missing-input-file"),
    pytest.param(missing_input_file_in_a_sweep, id="line-5-missing-input-file-in-a-sweep"),
    pytest.param(one_class_file, id="line-10-one-class-file"),
    pytest.param(class_with_one_sequence, id="line-10-class-with-one-sequence"),
])
def test_command_refusal(case: Callable[[Path], Refusal], tmp_path: Path) -> None:
    """The installed command keeps the README's promise on each case (its docstring quotes the
    line): exit 2, one paragraph, no traceback, nothing half written or left behind."""
    refusal = case(tmp_path)
    before = contents(refusal.folder)
    assert_refused(run(refusal.argv, tmp_path), *refusal.expected)
    assert_left_as_it_was(refusal.folder, before)


# Sweeps: kills, damaged records, reruns, the report ---------------------------------------------


def sweep_lines(stdout: str) -> list[str]:
    """The progress lines (``[  k/n] model task seed status seconds``) of a sweep's output."""
    return [line for line in stdout.splitlines() if line.startswith("[")]


def all_records(out: Path) -> list[dict]:
    return [json.loads(p.read_text()) for p in (out / "records").glob("*.json")]


def model_records(out: Path) -> dict[str, dict]:
    return {r["run_id"]: r for r in all_records(out) if r["kind"] == "model"}


def rows(out: Path) -> list[tuple[str, int | None, str]]:
    """(model, seed, status) of every record; a baseline's seed is that of whichever job
    computed it, so it is left out."""
    return sorted((r["model"], r["seed"] if r["kind"] == "model" else None, r["status"])
                  for r in all_records(out))


@pytest.mark.slow
def test_line_6_a_refused_config_leaves_the_folder_free(tmp_path: Path) -> None:
    """Line 6: "after `loopzoo train trainer.max_steps=abc out=D`, `loopzoo sweep suite=quick
    out=D` is refused with 'holds runs with suite None'"."""
    out = tmp_path / "out"
    refused = run(command("train", "trainer.max_steps=abc", f"out={out}"), tmp_path)
    assert_refused(refused, "trainer.max_steps = 'abc' is invalid; accepted: an integer >= 1")
    assert not out.exists()
    # The quick suite narrowed to one tiny run, so the folder's first record is a quick one.
    swept = run(command("sweep", "suite=quick", "model=gru", "seed=0", *TINY, f"out={out}"),
                tmp_path)
    assert swept.returncode == 0, swept.stderr
    assert json.loads((out / "loopzoo-out.json").read_text())["suite"] == "quick"
    assert [r["suite"] for r in model_records(out).values()] == ["quick"]


# Six runs of a few seconds each on two workers: long enough to kill the parent mid-sweep.
KILLABLE = ["model=gru,lstm,hidden-feedback", "seed=0,1", "task=adding", "task.options.length=8",
            "task.options.train_size=64", "task.options.val_size=16", "task.options.test_size=16",
            "task.batch_size=16", "task.budget=400", "trainer.max_steps=30",
            "protocol.val_every=10", "protocol.trials=null", "hydra.launcher.n_jobs=2"]


@pytest.mark.slow
def test_line_7_orphaned_workers_do_not_confuse_the_next_sweep(tmp_path: Path) -> None:
    """Line 7: "kill -9 only the sweep's parent, rerun: progress shows `[7/6]`…`[9/6]`, '-3 jobs
    did not report back', exit 2"."""
    out = tmp_path / "out"
    argv = command("sweep", *KILLABLE, f"out={out}")
    parent = subprocess.Popen(argv, cwd=tmp_path, start_new_session=True,
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 600
        while not model_records(out) and parent.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert parent.poll() is None, "the sweep ended before its parent was killed"
        parent.send_signal(signal.SIGKILL)  # the parent only: its workers go on as orphans
        parent.wait()
        os.killpg(parent.pid, 0)  # raises if no orphaned worker is left to confuse the rerun
        rerun = run(argv, tmp_path)
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(parent.pid, signal.SIGKILL)  # orphans of this test that are still running
    shown = rerun.stdout + rerun.stderr
    assert rerun.returncode == 0 and "Traceback" not in shown, shown
    assert "did not report back" not in shown, shown
    planned = int(re.search(r"(\d+) to run", rerun.stdout).group(1))
    assert [line.split("]")[0] for line in sweep_lines(rerun.stdout)] == [
        f"[{k:>3}/{planned}" for k in range(1, planned + 1)], shown
    runs = model_records(out)
    assert sorted((r["model"], r["seed"]) for r in runs.values()) == [
        (m, s) for m in ("gru", "hidden-feedback", "lstm") for s in (0, 1)]
    assert all(r["status"] == "ok" for r in runs.values())
    assert_whole(out)


def load_csv(folder: Path) -> Path:
    """Demo: hourly load (kW) of an invented cold store over five days."""
    rows = "".join(f"{h},{10 + 3 * math.sin(h / 5) + (h * 7919 % 13) / 13:.3f}\n"
                   for h in range(120))
    return write(folder / "load.csv", "hour,kw\n" + rows)


def csv_sweep(data: Path, out: Path) -> list[str]:
    """Three seeds of one tiny run on a file whose data, and so baselines, ignore the seed."""
    return command("sweep", "model=gru", "seed=0,1,2", "task=csv", f"task.options.path={data}",
                   "task.options.target=kw", "task.options.time=hour", "task.options.window=4",
                   *SMALL, "hydra.launcher.n_jobs=2", f"out={out}")


@pytest.fixture(scope="module")
def finished_sweep(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A folder holding ``load.csv`` and ``out``, a finished ``csv_sweep`` of it."""
    folder = tmp_path_factory.mktemp("finished")
    done = run(csv_sweep(load_csv(folder), folder / "out"), folder)
    assert done.returncode == 0, done.stderr
    return folder


def copy_of(finished: Path, tmp: Path) -> Path:
    out = tmp / "out"
    shutil.copytree(finished / "out", out)
    return out


@pytest.mark.slow
@pytest.mark.parametrize("victim", [
    pytest.param("csv-gru-s1-", id="line-8-damaged-run-record"),
    pytest.param("csv-persistence-", id="line-8-damaged-baseline-record"),
])
def test_line_8_a_damaged_record_is_set_aside_and_redone(victim: str, finished_sweep: Path,
                                                         tmp_path: Path) -> None:
    """Line 8: "One damaged record blocks the whole sweep: truncate any record and rerun"."""
    out = copy_of(finished_sweep, tmp_path)
    (path,) = (out / "records").glob(f"{victim}*.json")
    others = {rid: r for rid, r in model_records(out).items() if rid != path.stem}
    before = rows(out)
    damaged = path.read_bytes()[:40]
    path.write_bytes(damaged)
    rerun = run(csv_sweep(finished_sweep / "load.csv", out), tmp_path)
    shown = rerun.stdout + rerun.stderr
    assert rerun.returncode == 0 and "Traceback" not in shown, shown
    (aside,) = (out / "records-damaged").iterdir()
    assert aside.read_bytes() == damaged  # kept, byte for byte
    (said,) = rerun.stderr.strip().splitlines()
    assert said.startswith(f"{path}: not a readable run record (") and said.endswith(
        f"; moved to {aside} (kept) and the run is done again"), shown
    assert rows(out) == before  # its row done again, and every row once
    assert {rid: r for rid, r in model_records(out).items() if rid != path.stem} == others
    assert_whole(out / "records")


@pytest.mark.slow
def test_line_9_a_finished_sweep_starts_no_worker(tmp_path: Path) -> None:
    """Line 9: "A finished sweep costs as much to start as a new one … Plan first; launch only
    what is missing"."""
    out = tmp_path / "out"
    argv = command("sweep", "model=gru,lstm", "seed=0,1", *TINY, "hydra.launcher.n_jobs=2",
                   f"out={out}")
    # What a rerun costs is measured in benchmarks/RESULTS.md ("Harness"); here: that it starts
    # nothing (no launcher folder, no job line).
    first = run(argv, tmp_path)
    assert first.returncode == 0 and len(sweep_lines(first.stdout)) == 4, first.stderr
    launches = sorted((out / ".hydra-runs").iterdir())  # one folder per start of the launcher
    rerun = run(argv, tmp_path)
    assert rerun.returncode == 0, rerun.stderr
    assert "4 already recorded, 0 to run" in rerun.stdout and not sweep_lines(rerun.stdout)
    assert sorted((out / ".hydra-runs").iterdir()) == launches, "the launcher was started"


def table_rows(markdown: str, kind: str) -> dict[str, list[str]]:
    """Cells of the report's quality-table rows of ``kind`` (``classical``, ``topology``)."""
    rows = [[c.strip() for c in line.strip("|").split("|")] for line in markdown.splitlines()
            if line.startswith("|")]
    return {row[0]: row for row in rows if len(row) > 1 and row[1] == kind}


@pytest.mark.slow
def test_line_10_seed_independent_baselines_show_one_value(finished_sweep: Path,
                                                           tmp_path: Path) -> None:
    """Line 10: "baselines that do not depend on the seed are shown as '3 ok, ± 0' as if they
    did"."""
    out = copy_of(finished_sweep, tmp_path)
    report = run(command("report", str(out)), tmp_path)
    assert report.returncode == 0 and "Traceback" not in report.stderr, report.stderr
    markdown = (out / "report.md").read_text()
    classical = table_rows(markdown, "classical")
    assert "persistence" in classical and "± 0" not in markdown
    for name, cells in classical.items():  # quality, then the ok count
        assert cells[3].endswith(" (same for every seed)") and cells[4] == "1", (name, cells)
    assert table_rows(markdown, "topology")["gru"][4] == "3"
