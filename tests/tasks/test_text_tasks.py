"""Next-character tasks: the generated fleet log and the user's own text file."""

import math

import numpy as np
import pytest

import loopzoo

# Demo text of an invented scenario (a harbour ferry's deck notes); not a reference dataset.
FERRY_NOTES = "".join(
    f"ferry {n % 3 + 1} left pier {n % 5} at {6 + n % 12:02d}:{(7 * n) % 60:02d} with {n * 13 % 90}"
    " cars\n" for n in range(120)
)


def listing(folder):
    return sorted(p.name for p in folder.iterdir())


@pytest.fixture()
def notes(tmp_path):
    path = tmp_path / "notes.txt"
    path.write_text(FERRY_NOTES, encoding="utf-8")
    return path


def test_text_chunks_cover_each_part_once(notes):
    task = loopzoo.tasks.create("text", path=str(notes), length=50)
    text = FERRY_NOTES
    assert task.alphabet == tuple(sorted(set(text)))
    predicted = []
    for name in ("train", "val", "test"):
        split = task.split(name)
        for x, y, n, (first, last) in zip(split.x, split.y, split.lengths, split.span,
                                          strict=True):
            chars = "".join(task.alphabet[i] for i in x[:n].argmax(-1))
            assert chars == text[first : first + n]
            assert "".join(task.alphabet[i] for i in y[:n]) == text[first + 1 : last + 1]
            predicted += list(range(first + 1, last + 1))
    # Every character except the first of each part is a target exactly once.
    assert len(predicted) == len(set(predicted)) == len(text) - 3


def test_text_bigram_matches_numpy(notes):
    # Independent numpy bigram with add-one smoothing (common practice) on the training part.
    task = loopzoo.tasks.create("text", path=str(notes), length=40)
    bounds = task.describe()["parts"]
    index = {c: i for i, c in enumerate(task.alphabet)}
    ids = np.array([index[c] for c in FERRY_NOTES])
    train = ids[: bounds["train"]["end_char"]]
    counts = np.ones((len(index), len(index)))
    np.add.at(counts, (train[:-1], train[1:]), 1)
    probs = counts / counts.sum(1, keepdims=True)
    test = ids[bounds["test"]["first_char"] :]
    expected = -np.mean(np.log(probs[test[:-1], test[1:]])) / math.log(2)
    assert task.baselines()["bigram"].metrics["bits_per_char"] == pytest.approx(expected, rel=1e-9)


def test_fleet_log_is_seeded_and_well_formed():
    a = loopzoo.tasks.create("fleet-log", seed=0, lines=300)
    b = loopzoo.tasks.create("fleet-log", seed=0, lines=300)
    c = loopzoo.tasks.create("fleet-log", seed=1, lines=300)
    assert a.text == b.text != c.text
    lines = a.text.splitlines()
    assert len(lines) == 300
    stamps = [line[:16] for line in lines]
    assert stamps == sorted(stamps), "timestamps only move forward"
    opened = {line.split()[-1]: line.split()[2] for line in lines if "WARN ticket" in line}
    closed = [(line.split()[5], line.split()[2]) for line in lines if "closed ticket" in line]
    assert closed and len(closed) == len(set(closed))
    # A ticket is closed on the machine that opened it.
    assert all(opened[ticket] == machine for ticket, machine in closed)
    bigram = a.baselines()["bigram"].metrics["bits_per_char"]
    assert bigram < a.baselines()["unigram"].metrics["bits_per_char"] < math.log2(len(a.alphabet))


@pytest.mark.parametrize("content, message", [
    (b"", "empty"),
    (b"   \n\n", "empty"),
    (b"ok \xff\xfe", "not UTF-8: byte 3"),
    (b"tiny", "at least 18 characters"),
])
def test_bad_text_files(tmp_path, content, message):
    path = tmp_path / "bad.txt"
    path.write_bytes(content)
    before = listing(tmp_path)
    with pytest.raises(ValueError, match=message):
        loopzoo.tasks.create("text", path=str(path))
    assert listing(tmp_path) == before, "nothing is written for a bad input"


def test_minimum_text_length_is_exact(tmp_path):
    # The stated minimum (18 at the default 10 % / 10 %) works and one character less fails.
    path = tmp_path / "short.txt"
    path.write_text("abcdefghijklmnopqr", encoding="utf-8")
    task = loopzoo.tasks.create("text", path=str(path))
    assert all(len(task.split(name)) == 1 for name in ("train", "val", "test"))
    path.write_text("abcdefghijklmnopq", encoding="utf-8")
    with pytest.raises(ValueError, match="has 17 characters.*at least 18"):
        loopzoo.tasks.create("text", path=str(path))


def test_missing_text_file_and_missing_path(tmp_path):
    with pytest.raises(FileNotFoundError, match="nope.txt"):
        loopzoo.tasks.create("text", path=str(tmp_path / "nope.txt"))
    with pytest.raises(ValueError, match="path"):
        loopzoo.tasks.create("text")
    assert listing(tmp_path) == []
