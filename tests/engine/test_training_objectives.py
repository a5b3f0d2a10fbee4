"""Masked training losses against scikit-learn's metrics on the scored positions."""

import numpy as np
import pytest
import torch
from sklearn.metrics import log_loss, mean_squared_error

from loopzoo.engine.objectives import masked_loss


def test_regression_loss_is_the_mse_of_the_scored_positions():
    generator = torch.Generator().manual_seed(0)
    prediction = torch.randn(4, 6, 2, generator=generator, dtype=torch.float64)
    target = torch.randn(4, 6, 2, generator=generator, dtype=torch.float64)
    mask = torch.rand(4, 6, generator=generator) > 0.5
    expected = mean_squared_error(target[mask].numpy(), prediction[mask].numpy())  # scikit-learn
    assert float(masked_loss("regression", prediction, target, mask)) == pytest.approx(expected)


def test_classification_loss_is_the_log_loss_of_the_scored_positions():
    generator = torch.Generator().manual_seed(1)
    logits = torch.randn(3, 5, 4, generator=generator, dtype=torch.float64)
    target = torch.randint(0, 4, (3, 5), generator=generator)
    mask = torch.zeros(3, 5, dtype=torch.bool)
    mask[:, -2:] = True
    probabilities = torch.softmax(logits[mask], dim=-1).numpy()
    expected = log_loss(target[mask].numpy(), probabilities, labels=np.arange(4))  # scikit-learn
    assert float(masked_loss("classification", logits, target, mask)) == pytest.approx(expected)


def test_unscored_positions_do_not_move_the_loss():
    prediction = torch.zeros(2, 3, 1)
    target = torch.zeros(2, 3, 1)
    mask = torch.tensor([[False, False, True], [False, False, True]])
    target[:, :2] = 100.0
    assert float(masked_loss("regression", prediction, target, mask)) == 0.0


def test_a_batch_without_scored_positions_gives_zero_with_a_gradient_path():
    prediction = torch.ones(2, 3, 1, requires_grad=True)
    loss = masked_loss("regression", prediction, torch.zeros(2, 3, 1), torch.zeros(2, 3).bool())
    loss.backward()
    assert float(loss.detach()) == 0.0 and prediction.grad is not None


def test_unknown_kind_is_refused():
    with pytest.raises(ValueError, match="regression, classification"):
        masked_loss("ranking", torch.zeros(1, 1, 1), torch.zeros(1, 1, 1), torch.ones(1, 1).bool())
