"""Adding and copy tasks against their published definitions and memoryless baselines."""

import math

import numpy as np
import pytest
import torch

import loopzoo


def test_adding_memoryless_mse_is_one_sixth():
    # Arjovsky, Shah & Bengio (ICML 2016): always predicting 1 gives MSE = Var(U1 + U2) = 1/6.
    task = loopzoo.tasks.create("adding", seed=4, length=60, test_size=4000)
    mse = task.baselines()["memoryless"].metrics["mse"]
    # Standard error of the mean of (S - 1)^2 with S - 1 triangular on [-1, 1]:
    # Var = E[Z^4] - (1/6)^2 = 1/15 - 1/36 = 7/180 (derived from the definition).
    standard_error = math.sqrt(7 / 180 / 4000)
    assert abs(mse - 1 / 6) < 4 * standard_error


def test_adding_layout_matches_definition():
    # Arjovsky et al. 2016: values U[0, 1]; one marker in each half; target = sum of marked values.
    task = loopzoo.tasks.create("adding", seed=1, length=31, train_size=300)
    split = task.split("train")
    values, markers = split.x[..., 0], split.x[..., 1]
    assert values.min() >= 0 and values.max() <= 1
    assert torch.all(markers.sum(dim=1) == 2)
    half = 31 // 2
    assert torch.all(markers[:, :half].sum(dim=1) == 1)
    assert torch.all(markers[:, half:].sum(dim=1) == 1)
    expected = (values * markers).sum(dim=1)
    torch.testing.assert_close(split.y[:, -1, 0], expected)
    assert split.mask.sum() == len(split) and torch.all(split.mask[:, -1])


@pytest.mark.parametrize("length, published", [(100, 0.17329), (200, 0.09452), (500, 0.03999)])
def test_copy_memoryless_cross_entropy(length, published):
    # Arjovsky, Shah & Bengio, "Unitary Evolution Recurrent Neural Networks" (ICML 2016), copy
    # memory task: the memoryless strategy scores 10 ln 8 / (T + 20), i.e. 0.17329 / 0.09452 /
    # 0.03999 at T = 100 / 200 / 500 (the formula from memory; the values computed from it).
    task = loopzoo.tasks.create("copy", seed=0, length=length, train_size=2, val_size=2,
                                test_size=50)
    formula = 10 * math.log(8) / (length + 20)
    memoryless = task.baselines()["memoryless"].metrics["cross_entropy"]
    assert memoryless == pytest.approx(formula, rel=1e-6)
    assert formula == pytest.approx(published, abs=1e-5)


def test_copy_layout_matches_definition():
    # Arjovsky et al. 2016: 10 data symbols from 8, T - 1 blanks, delimiter, 10 blanks;
    # target blank for T + 10 steps then the data symbols.
    lag = 15
    task = loopzoo.tasks.create("copy", seed=2, length=lag, train_size=200)
    split = task.split("train")
    ids = split.x.argmax(dim=-1)
    assert split.x.shape == (200, lag + 20, 10)
    data = ids[:, :10]
    assert data.min() >= 1 and data.max() <= 8
    assert torch.all(ids[:, 10 : 10 + lag - 1] == 0)
    assert torch.all(ids[:, 10 + lag - 1] == 9)
    assert torch.all(ids[:, 10 + lag :] == 0)
    assert torch.all(split.y[:, : lag + 10] == 0)
    assert torch.equal(split.y[:, lag + 10 :], data)
    # Every data symbol occurs (uniform draws of 2000 symbols from 8).
    assert set(np.unique(data.numpy())) == set(range(1, 9))


def test_copy_score_matches_torch_cross_entropy():
    # Reference: torch.nn.functional.cross_entropy, mean over all T + 20 steps.
    task = loopzoo.tasks.create("copy", seed=5, length=10, test_size=30)
    test = task.split("test")
    logits = torch.randn(*test.y.shape, 10, generator=torch.Generator().manual_seed(0))
    expected = torch.nn.functional.cross_entropy(logits.reshape(-1, 10), test.y.reshape(-1))
    scores = task.score(logits, test)
    assert scores["cross_entropy"] == pytest.approx(float(expected), rel=1e-5)
    accuracy = (logits.argmax(-1) == test.y).double().mean()
    assert scores["accuracy"] == pytest.approx(float(accuracy))
