"""Parity and sines against their definitions and independent numpy computations."""

import math

import numpy as np
import pytest

import loopzoo


def test_parity_targets_are_running_xor():
    task = loopzoo.tasks.create("parity", seed=2, length=13, train_size=50)
    split = task.split("train")
    bits = split.x[..., 0].numpy().astype(int)
    for row, targets in zip(bits, split.y.numpy(), strict=True):
        running = 0
        for bit, target in zip(row, targets, strict=True):
            running ^= bit
            assert target == running


def test_parity_memoryless_baseline_is_exact():
    # From the definition: y_0 = b_0 is known; for t > 0 y_t is independent of b_t (ln 2 each).
    task = loopzoo.tasks.create("parity", seed=0, length=10, test_size=200)
    memoryless = task.baselines()["memoryless"].metrics["cross_entropy"]
    assert memoryless == pytest.approx(9 * math.log(2) / 10)


@pytest.fixture(scope="module")
def sines():
    return loopzoo.tasks.create("sines", seed=1, noise=0.2, horizons=[1, 3], length=80,
                                train_size=50, val_size=20, test_size=800)


def test_sines_optimal_error_is_the_noise_variance(sines):
    # The noise-free signal leaves only eps_{t+h} ~ N(0, 0.2^2): expected MSE = 0.04. The mean of
    # M squared Gaussians has standard error sigma^2 sqrt(2 / M).
    optimal = sines.bounds()["optimal"].metrics
    samples = 800 * 80
    tolerance = 4 * 0.04 * math.sqrt(2 / samples)
    assert abs(optimal["mse_h1"] - 0.04) < tolerance
    assert abs(optimal["mse_h3"] - 0.04) < tolerance


def test_sines_persistence_equals_numpy(sines):
    # Independent numpy: one-step persistence error from consecutive observed values.
    test = sines.split("test")
    observed = test.x[..., 0].numpy().astype(np.float64)
    last_target = test.y[:, -1, 0].numpy().astype(np.float64)
    following = np.concatenate([observed[:, 1:], last_target[:, None]], axis=1)
    expected = np.mean((following - observed) ** 2)
    persistence = sines.baselines()["persistence"].metrics
    assert persistence["mse_h1"] == pytest.approx(expected, rel=1e-6)


def test_sines_horizon_targets_line_up(sines):
    test = sines.split("test")
    observed = test.x[..., 0]
    # y[:, t, 0] is the observation one step after t; y[:, t, 1] three steps after.
    assert np.allclose(test.y[:, :-1, 0], observed[:, 1:])
    assert np.allclose(test.y[:, :-3, 1], observed[:, 3:])


@pytest.mark.parametrize("options, field", [
    ({"horizons": [3, 1]}, "horizons"),
    ({"horizons": []}, "horizons"),
    ({"noise": -1.0}, "noise"),
    ({"periods": [10.0], "amplitudes": [1.0, 2.0]}, "amplitudes"),
    ({"length": 0}, "length"),
])
def test_sines_bad_options(options, field):
    with pytest.raises(ValueError, match=field):
        loopzoo.tasks.create("sines", **options)
