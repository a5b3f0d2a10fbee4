"""Paths and disks that refuse a write end in exit code 2 and one paragraph, never a traceback,
and leave no result file half written (issue 15, item 4)."""

import errno
import os

import pytest
from support.tiny import tiny

import loopzoo
from loopzoo import cli

TINY = tiny("trainer.enable_progress_bar=false")


def one_paragraph(capsys, *expected):
    err = capsys.readouterr().err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    for text in expected:
        assert text in err, err
    return err


@pytest.fixture()
def a_file(tmp_path):
    path = tmp_path / "notes.txt"
    path.write_text("keep me\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("command", ["train", "sweep"])
def test_out_that_is_a_file_or_under_one(command, a_file, capsys):
    assert cli.main([command, "model=gru", *TINY, f"out={a_file}"]) == 2
    one_paragraph(capsys, "is a file; it must name a folder")
    assert cli.main([command, "model=gru", *TINY, f"out={a_file / 'x'}"]) == 2
    one_paragraph(capsys, "is a file, so no folder can be made under it")
    assert a_file.read_text() == "keep me\n"


def test_out_that_cannot_be_written(tmp_path, monkeypatch, capsys):
    # Permission bits do not stop root, so the refusal is shown through os.access, which is what
    # the check asks (a read-only mount answers the same way).
    locked = tmp_path / "locked"
    locked.mkdir()
    real = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, **kw: False if str(p) == str(locked)
                        else real(p, mode, **kw))
    assert cli.main(["train", "model=gru", *TINY, f"out={locked / 'runs'}"]) == 2
    one_paragraph(capsys, "is not writable by this user")
    assert list(locked.iterdir()) == []


def enospc(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_a_full_disk_during_train(tmp_path, monkeypatch, capsys):
    out = tmp_path / "out"
    monkeypatch.setattr(os, "fsync", enospc)  # every atomic write fails as on a full disk
    assert cli.main(["train", "model=gru", *TINY, f"out={out}"]) == 2
    one_paragraph(capsys, "No space left on device", "the disk is full: free some space")
    written = [p for p in out.rglob("*") if p.is_file() and "records" in p.parts]
    assert written == []  # no record, and no temporary file left behind
    monkeypatch.undo()
    assert cli.main(["train", "model=gru", *TINY, f"out={out}"]) == 0  # the rerun finishes


def test_a_full_disk_during_report(tmp_path, monkeypatch, capsys):
    out = tmp_path / "out"
    assert cli.main(["train", "model=gru", *TINY, f"out={out}"]) == 0
    capsys.readouterr()
    monkeypatch.setattr(os, "fsync", enospc)
    assert cli.main(["report", str(out)]) == 2
    one_paragraph(capsys, "No space left on device")
    assert not any(p.name.startswith("report") for p in out.iterdir())


def test_a_launcher_with_no_workers(tmp_path, capsys):
    out = tmp_path / "out"
    for setting, message in (("hydra.launcher.n_jobs=0", "hydra.launcher.n_jobs = 0 is invalid; "
                              "accepted: a positive number"),
                             ("hydra.launcher.n_jobs=two", "hydra.launcher.n_jobs=two")):
        assert cli.main(["sweep", "model=gru", *TINY, setting, f"out={out}"]) == 2
        one_paragraph(capsys, message)
    assert not out.exists()


def test_export_under_a_file(tmp_path, a_file, capsys):
    artifact = loopzoo.save(loopzoo.create("gru", input_size=2, output_size=1, hidden_size=3),
                            tmp_path / "artifact")
    assert cli.main(["export", str(artifact), "--format", "onnx", "--out", str(a_file / "x")]) == 2
    one_paragraph(capsys, "is a file, so no folder can be made under it")
    assert cli.main(["export", str(artifact), "--format", "onnx", "--out", str(a_file)]) == 2
    one_paragraph(capsys, "is a file; it must name a folder")
    assert a_file.read_text() == "keep me\n"
