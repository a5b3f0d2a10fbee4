"""Atomic writes: the target is either the old file or the whole new one, never a fragment."""

import json
import os
import stat

import pytest

from loopzoo._io import atomic_write_bytes, atomic_write_json, atomic_write_text


def test_written_file_has_the_mode_a_plain_open_gives(tmp_path):
    plain = tmp_path / "plain.txt"
    plain.write_text("x")  # the reference: Python's own open() under the current umask
    atomic_write_text(tmp_path / "atomic.txt", "x")
    mode = stat.S_IMODE(os.stat(tmp_path / "atomic.txt").st_mode)
    assert mode == stat.S_IMODE(os.stat(plain).st_mode)


def test_failed_write_keeps_the_old_file_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "record.json"
    atomic_write_json(target, {"status": "ok"})

    class Unwritable:
        def __len__(self) -> int:
            raise RuntimeError("disk gone")

    with pytest.raises(TypeError):
        atomic_write_bytes(target, Unwritable())  # type: ignore[arg-type]
    assert json.loads(target.read_text()) == {"status": "ok"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["record.json"]


def test_json_refuses_nan_instead_of_writing_invalid_json(tmp_path):
    with pytest.raises(ValueError):
        atomic_write_json(tmp_path / "r.json", {"mse": float("nan")})
    assert not any(tmp_path.iterdir())


def test_parent_folders_are_created(tmp_path):
    atomic_write_text(tmp_path / "a" / "b" / "c.txt", "deep")
    assert (tmp_path / "a" / "b" / "c.txt").read_text() == "deep"
