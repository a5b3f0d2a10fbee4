"""The shared pieces under every task: scoring, scaling, chronological parts, stratified draws."""

import math

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import log_loss, mean_absolute_error, mean_squared_error

from loopzoo.tasks._base import part_bounds, shortest_record
from loopzoo.tasks._scaling import Standardizer
from loopzoo.tasks._scoring import classification_metrics, regression_metrics
from loopzoo.tasks._sequence_classes import stratified_parts


def test_regression_metrics_match_sklearn():
    # Reference: scikit-learn's mean_squared_error / mean_absolute_error on the masked positions.
    rng = np.random.default_rng(0)
    prediction, target = rng.normal(size=(2, 6, 9, 3))
    mask = rng.random((6, 9)) < 0.4
    scores = regression_metrics(torch.tensor(prediction), torch.tensor(target),
                                torch.tensor(mask), channel_names=("a", "b", "c"))
    assert scores["mse"] == pytest.approx(mean_squared_error(target[mask], prediction[mask]))
    assert scores["mae"] == pytest.approx(mean_absolute_error(target[mask], prediction[mask]))
    assert scores["rmse"] == pytest.approx(math.sqrt(scores["mse"]))
    for i, name in enumerate("abc"):
        assert scores[f"mse_{name}"] == pytest.approx(
            mean_squared_error(target[mask][:, i], prediction[mask][:, i]))


def test_classification_metrics_match_sklearn():
    # Reference: scikit-learn's log_loss (natural log) on softmax probabilities.
    rng = np.random.default_rng(1)
    logits = rng.normal(size=(5, 7, 4)) * 2
    target = rng.integers(0, 4, size=(5, 7))
    mask = rng.random((5, 7)) < 0.6
    scores = classification_metrics(torch.tensor(logits), torch.tensor(target),
                                    torch.tensor(mask), next_symbol=True)
    probs = torch.softmax(torch.tensor(logits[mask]), -1).numpy()
    expected = log_loss(target[mask], probs, labels=[0, 1, 2, 3])
    assert scores["cross_entropy"] == pytest.approx(expected, rel=1e-9)
    assert scores["bits_per_char"] == pytest.approx(expected / math.log(2), rel=1e-9)
    assert scores["accuracy"] == pytest.approx(np.mean(probs.argmax(-1) == target[mask]))


@settings(max_examples=50, deadline=None)
@given(st.integers(1, 40), st.floats(0.01, 0.45), st.floats(0.01, 0.45))
def test_shortest_record_is_the_minimum(per_part, val_fraction, test_fraction):
    total = shortest_record(per_part, val_fraction, test_fraction)

    def sizes(n):
        return [b - a for a, b in part_bounds(n, val_fraction, test_fraction).values()]

    assert min(sizes(total)) >= per_part
    assert all(min(sizes(n)) < per_part for n in range(3 * per_part, total))
    bounds = part_bounds(total, val_fraction, test_fraction)
    assert bounds["train"][0] == 0 and bounds["test"][1] == total
    assert bounds["train"][1] == bounds["val"][0] and bounds["val"][1] == bounds["test"][0]


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 2**31), st.integers(30, 300))
def test_stratified_parts_partition_each_class(seed, count):
    labels = np.random.default_rng(seed).integers(0, 4, size=count)
    sizes = [int((labels == label).sum()) for label in np.unique(labels)]
    if any(min(round(n * 0.2), round(n * 0.3), n - round(n * 0.2) - round(n * 0.3)) < 1
           for n in sizes):  # a class that cannot reach train, val and test is refused
        with pytest.raises(ValueError, match="too few to appear in the train, val and test"):
            stratified_parts(labels, {"val": 0.2, "test": 0.3}, np.random.default_rng(seed))
        return
    parts = stratified_parts(labels, {"val": 0.2, "test": 0.3}, np.random.default_rng(seed))
    everything = np.concatenate(list(parts.values()))
    assert np.array_equal(np.sort(everything), np.arange(count))
    for label in range(4):
        members = (labels == label).sum()
        assert abs((labels[parts["test"]] == label).sum() - 0.3 * members) <= 0.5
        assert abs((labels[parts["val"]] == label).sum() - 0.2 * members) <= 0.5


def test_standardizer_round_trip_and_constant_columns():
    rng = np.random.default_rng(2)
    values = np.column_stack([rng.normal(5, 3, 200), np.full(200, 7.0)])
    scaler = Standardizer.fit(values)
    assert scaler.mean == pytest.approx((values[:, 0].mean(), 7.0))
    assert scaler.std == pytest.approx((values[:, 0].std(), 1.0))  # constant column: only shifted
    scaled = scaler.transform(values)
    assert scaled[:, 0].mean() == pytest.approx(0, abs=1e-12)
    assert np.allclose(scaler.inverse(torch.tensor(scaled)).numpy(), values)
