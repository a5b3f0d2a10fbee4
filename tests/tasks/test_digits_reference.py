"""Digits as sequences, checked against scikit-learn's own data and LogisticRegression score."""

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression

import loopzoo


@pytest.fixture(scope="module")
def digits():
    return load_digits()


@pytest.mark.parametrize("read, shape", [("rows", (8, 8)), ("pixels", (64, 1))])
def test_sequences_are_the_images(digits, read, shape):
    # sklearn.datasets.load_digits: 1,797 images of 8x8, values 0-16 (UCI optical digits).
    task = loopzoo.tasks.create("digits", seed=3, read=read)
    total = 0
    for name in ("train", "val", "test"):
        split = task.split(name)
        rows = split.span[:, 0].numpy()
        total += len(rows)
        assert split.x.shape[1:] == shape
        assert np.allclose(split.x.numpy().reshape(-1, 64) * 16, digits.data[rows])
        assert (split.y[:, -1].numpy() == digits.target[rows]).all()
        assert split.mask[:, -1].all() and split.mask.sum() == len(split)
    assert total == 1797


def test_logistic_baseline_within_a_point_of_sklearn(digits):
    # Reference: scikit-learn's LogisticRegression.score on the same split's flattened images.
    task = loopzoo.tasks.create("digits", seed=0)
    train = task.split("train").span[:, 0].numpy()
    test = task.split("test").span[:, 0].numpy()
    reference = LogisticRegression(max_iter=5000).fit(digits.data[train] / 16,
                                                      digits.target[train])
    expected = reference.score(digits.data[test] / 16, digits.target[test])
    assert abs(task.baselines()["logistic"].metrics["accuracy"] - expected) <= 0.01
    assert expected > 0.9  # sanity: a linear model separates these digits well


def test_stratified_parts(digits):
    task = loopzoo.tasks.create("digits", seed=1, val_fraction=0.25, test_fraction=0.25)
    test = task.split("test")
    counts = np.bincount(test.y[:, -1].numpy(), minlength=10)
    expected = np.bincount(digits.target, minlength=10) * 0.25
    assert np.all(np.abs(counts - expected) <= 1)
