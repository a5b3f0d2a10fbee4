"""The n-gram rows against hand-computed values, and the compressor rate against lzma itself.

Formulas: Chen & Goodman, "An Empirical Study of Smoothing Techniques for Language Modeling",
Harvard TR-10-98, 1998: interpolated absolute discounting, interpolated Kneser-Ney (continuation
counts at the lower orders) and modified Kneser-Ney with discounts D1, D2, D3+ estimated from the
count-of-counts, D_j = j - (j + 1) Y n_{j+1} / n_j, Y = n1 / (n1 + 2 n2) (written from memory of
that report; no equation numbers asserted). The one-discount estimate D = n1 / (n1 + 2 n2) is
from Ney, Essen & Kneser, Computer Speech and Language 8, 1994.
The corpora below are small enough that every count is listed and the values are worked by hand.
"""

from __future__ import annotations

import lzma
import math

import numpy as np
import pytest

import loopzoo
from loopzoo.tasks._ngram import NGramModel, contexts

A, B, C = 0, 1, 2


def _events(string: str) -> tuple[np.ndarray, np.ndarray]:
    """Predict s[1:] from the symbol before (order 2): contexts (M, 1), targets (M,)."""
    ids = np.array(["abc".index(ch) for ch in string])
    return ids[:-1, None], ids[1:]


def _probs(model: NGramModel, context: int) -> list[float]:
    return np.exp(model.log_probs(np.array([[context]]))[0]).tolist()


def test_absolute_discounting_by_hand():
    # "aababc": events a->a, a->b, b->a, a->b, b->c.
    # Unigram (raw target counts): a 2, b 2, c 1; n1 = 1, n2 = 2, D = 1/5; total 5,
    #   gamma = D x 3 types = 3/5; p1(w) = (c - D + 3/5 x 1/3) / 5 = 2/5, 2/5, 1/5.
    # Bigram: aa 1, ab 2, ba 1, bc 1; n1 = 3, n2 = 1, D = 3/5.
    #   context a: total 3, gamma = 3/5 x 2 = 6/5: p(a|a) = (1 - 3/5 + 6/5 x 2/5) / 3 = 22/75,
    #     p(b|a) = (2 - 3/5 + 12/25) / 3 = 47/75, p(c|a) = (6/5 x 1/5) / 3 = 6/75;
    #   context b: total 2, gamma = 6/5: p(a|b) = 11/25, p(b|b) = 6/25, p(c|b) = 8/25.
    model = NGramModel(classes=3, order=2, method="absolute-discounting").fit(*_events("aababc"))
    assert _probs(model, A) == pytest.approx([22 / 75, 47 / 75, 6 / 75], rel=1e-12)
    assert _probs(model, B) == pytest.approx([11 / 25, 6 / 25, 8 / 25], rel=1e-12)
    # context c was never seen: the unigram level alone
    assert _probs(model, C) == pytest.approx([2 / 5, 2 / 5, 1 / 5], rel=1e-12)


def test_interpolated_kneser_ney_by_hand():
    # "aabab" over {a, b}: events a->a, a->b, b->a, a->b.
    # Bigram (raw counts, highest order): aa 1, ab 2, ba 1; n1 = 2, n2 = 1, D = 1/2.
    # Unigram (continuation counts: distinct left neighbours): a 2 (a, b), b 1 (a);
    #   n1 = 1, n2 = 1, D = 1/3; total 3, gamma = 2/3:
    #   p1(a) = (2 - 1/3 + 1/3) / 3 = 2/3, p1(b) = 1/3.
    # context a: total 3, gamma = 1/2 x 2 = 1: p(a|a) = (1/2 + 2/3) / 3 = 7/18, p(b|a) = 11/18.
    # context b: total 1, gamma = 1/2: p(a|b) = 1/2 + 1/3 = 5/6, p(b|b) = 1/6.
    model = NGramModel(classes=2, order=2, method="kneser-ney").fit(*_events("aabab"))
    assert _probs(model, A) == pytest.approx([7 / 18, 11 / 18], rel=1e-12)
    assert _probs(model, B) == pytest.approx([5 / 6, 1 / 6], rel=1e-12)


def test_modified_kneser_ney_by_hand():
    # The same corpus. Bigram: n1 = 2, n2 = 1, n3 = 0, Y = 2 / (2 + 2) = 1/2,
    #   D1 = 1 - 2Y n2/n1 = 1/2, D2 = 2 - 3Y n3/n2 = 2.
    # Unigram continuation counts a 2, b 1: Y = 1/3, D1 = 1 - 2/3 = 1/3, D2 = 2;
    #   gamma = D1 + D2 = 7/3: p1(a) = (2 - 2 + 7/3 x 1/2) / 3 = 7/18, p1(b) = 11/18.
    # context a (aa 1, ab 2): gamma = 1/2 + 2 = 5/2:
    #   p(a|a) = (1 - 1/2 + 5/2 x 7/18) / 3 = 53/108, p(b|a) = (0 + 5/2 x 11/18) / 3 = 55/108.
    model = NGramModel(classes=2, order=2, method="modified-kneser-ney").fit(*_events("aabab"))
    assert model.levels[1].discounts[:2].tolist() == [0.5, 2.0]
    assert _probs(model, A) == pytest.approx([53 / 108, 55 / 108], rel=1e-12)


def test_contexts_are_padded_with_the_start_symbol():
    inputs = np.array([[0, 1, 2, -1]])
    mask = np.array([[True, True, True, False]])
    assert contexts(inputs, mask, 3, start=9).tolist() == [[9, 9, 0], [9, 0, 1], [0, 1, 2]]


@pytest.fixture(scope="module")
def reber():
    return loopzoo.tasks.create("reber", seed=0, train_size=400, val_size=100, test_size=200)


def test_ngram_lies_between_the_grammar_optimum_and_the_bigram(reber):
    # The embedded Reber grammar (Reber 1967; Cleeremans et al. 1989) needs the second symbol
    # remembered across the whole inner string, beyond any n-gram of order <= 5: so the n-gram
    # row must stay above the exact optimum, and with more context it beats the bigram.
    row = reber.baselines()["ngram"]
    optimal = reber.bounds()["optimal"].metrics["bits_per_char"]
    bigram = reber.baselines()["bigram"].metrics["bits_per_char"]
    assert optimal < row.metrics["bits_per_char"] < bigram
    assert row.details["order"] in (2, 3, 4, 5) and row.fit_seconds > 0
    assert min(row.details["val_bits_per_char"].values()) == pytest.approx(
        row.details["val_bits_per_char"][f"{row.details['method']}/{row.details['order']}"])


def test_compressor_rate_is_lzma_given_the_training_text(tmp_path):
    # Bits per character of the test part given the training part as history: 8 x (size of
    # compress(train + test) - size of compress(train)) / predicted characters (common practice).
    path = tmp_path / "notes.txt"
    path.write_text("".join(f"line {i % 37} of the pump log, pressure {i * 7 % 101}\n"
                            for i in range(400)), encoding="utf-8")
    task = loopzoo.tasks.create("text", path=str(path), length=32)
    parts = task.describe()["parts"]
    train = task.text[parts["train"]["first_char"]:parts["train"]["end_char"]].encode()
    test = task.text[parts["test"]["first_char"]:parts["test"]["end_char"]].encode()

    def size(data: bytes) -> int:
        return len(lzma.compress(data, preset=9 | lzma.PRESET_EXTREME))

    expected = 8 * (size(train + test) - size(train)) / (len(test) - 1)
    row = task.bounds()["compressor"]
    assert row.kind == "reference" and not row.seed_dependent
    assert row.metrics["bits_per_char"] == pytest.approx(expected, rel=1e-12)
    assert row.metrics["cross_entropy"] == pytest.approx(expected * math.log(2), rel=1e-12)
    # the text repeats itself: the n-gram and the compressor both beat the bigram
    bigram = task.baselines()["bigram"].metrics["bits_per_char"]
    assert task.baselines()["ngram"].metrics["bits_per_char"] < bigram
