"""Reber task against the grammar's automaton (Reber, "Implicit learning of artificial grammars",
1967, figure 1; the benchmark form of Cleeremans, Servan-Schreiber & McClelland, "Finite state
automata and simple recurrent networks", Neural Computation 1989; transitions from memory)."""

import math

import pytest
import torch

import loopzoo

# Written out here independently of the task's own table: state -> {symbol: next state}.
AUTOMATON = {
    0: {"B": 1},
    1: {"T": 2, "P": 3},
    2: {"S": 2, "X": 4},
    3: {"T": 3, "V": 5},
    4: {"X": 3, "S": 6},
    5: {"P": 4, "V": 6},
    6: {"E": "end"},
}
ALPHABET = "BTPSXVE"


def decode(split):
    """The full strings: each input symbol, then the last target."""
    strings = []
    for x, y, length in zip(split.x, split.y, split.lengths, strict=True):
        ids = x[:length].argmax(-1).tolist() + [int(y[length - 1])]
        strings.append("".join(ALPHABET[i] for i in ids))
    return strings


def walk(string):
    """Accept a plain Reber string; return the number of choices before each symbol, or None."""
    state, choices = 0, []
    for symbol in string:
        if state == "end" or symbol not in AUTOMATON[state]:
            return None
        choices.append(len(AUTOMATON[state]))
        state = AUTOMATON[state][symbol]
    return choices if state == "end" else None


def walk_embedded(string):
    """Accept B (T|P) <Reber string> (same T|P) E; choices before each symbol, or None."""
    if len(string) < 5 or string[0] != "B" or string[1] not in "TP":
        return None
    if string[-2] != string[1] or string[-1] != "E":
        return None
    inner = walk(string[2:-2])
    return None if inner is None else [1, 2, *inner, 1, 1]


@pytest.fixture(scope="module")
def task():
    return loopzoo.tasks.create("reber", seed=3, train_size=400, val_size=100, test_size=600)


def test_every_string_is_accepted(task):
    for name in ("train", "val", "test"):
        for string in decode(task.split(name)):
            assert walk_embedded(string) is not None, string


def test_optimal_loss_matches_automaton(task):
    # Each branching step costs ln 2 and each forced step 0 (exact, from the automaton).
    costs = []
    for string in decode(task.split("test")):
        choices = walk_embedded(string)
        costs += [math.log(n) for n in choices[1:]]  # the first symbol is never predicted
    expected = sum(costs) / len(costs)
    assert task.optimal_cross_entropy("test") == pytest.approx(expected, rel=1e-12)
    optimal = task.bounds()["optimal"].metrics
    assert optimal["cross_entropy"] == pytest.approx(expected, rel=1e-9)
    assert optimal["bits_per_char"] == pytest.approx(expected / math.log(2), rel=1e-9)
    assert task.baselines()["bigram"].metrics["cross_entropy"] > expected


def test_variable_lengths_and_long_dependency(task):
    split = task.split("train")
    assert split.lengths.unique().numel() > 5
    strings = decode(split)
    assert {s[1] for s in strings} == {"T", "P"}
    # The second-to-last symbol repeats the second one (embedded form).
    assert all(s[-2] == s[1] for s in strings)


def test_plain_form_contains_the_shortest_strings():
    # The shortest strings the automaton accepts are BTXSE and BPVVE; each has probability 1/16.
    plain = loopzoo.tasks.create("reber", seed=0, embedded=False, train_size=500)
    strings = decode(plain.split("train"))
    assert all(walk(s) is not None for s in strings)
    assert {"BTXSE", "BPVVE"} <= set(strings)
    assert min(len(s) for s in strings) == 5


def test_bigram_matches_counted_transition_frequencies(task):
    # Independent count-based bigram with add-one smoothing (common practice), scored by torch.
    train, test = task.split("train"), task.split("test")
    counts = torch.ones(7, 7, dtype=torch.float64)
    for x, y, length in zip(train.x, train.y, train.lengths, strict=True):
        for current, following in zip(x[:length].argmax(-1), y[:length], strict=True):
            counts[current, following] += 1
    log_probs = (counts / counts.sum(1, keepdim=True)).log()
    picked = [log_probs[c, f] for x, y, n in zip(test.x, test.y, test.lengths, strict=True)
              for c, f in zip(x[:n].argmax(-1), y[:n], strict=True)]
    expected = -float(torch.stack(picked).mean())
    assert task.baselines()["bigram"].metrics["cross_entropy"] == pytest.approx(expected, rel=1e-9)
