"""Shared helpers for the production-path tests: small models of every registered topology."""

from __future__ import annotations

import pytest
import torch

import loopzoo

SIZES = {"input_size": 3, "output_size": 2, "hidden_size": 6}


def _build(topology: str, seed: int = 0) -> torch.nn.Module:
    """A small model of ``topology`` with its default options and seeded weights, in eval mode."""
    torch.manual_seed(seed)
    return loopzoo.create(topology, **SIZES).eval()


def _train_briefly(model: torch.nn.Module, steps: int = 3, seed: int = 1) -> torch.nn.Module:
    """A few Adam steps on random data, so the weights differ from any initialisation."""
    generator = torch.Generator().manual_seed(seed)
    x = torch.randn(4, 7, model.input_size, generator=generator)
    target = torch.randn(4, 7, model.output_size, generator=generator)
    optimiser = torch.optim.Adam(model.parameters(), lr=1e-2)
    model.train()
    for _ in range(steps):
        optimiser.zero_grad()
        extra = {"targets": target} if model.feeds_back_output else {}
        y, _ = model(x, **extra)
        torch.nn.functional.mse_loss(y, target).backward()
        optimiser.step()
    return model.eval()


@pytest.fixture
def build():
    """``build(topology, seed=0)``: a small seeded model in eval mode."""
    return _build


@pytest.fixture
def train_briefly():
    """``train_briefly(model)``: the model after a few Adam steps on random data."""
    return _train_briefly


@pytest.fixture(params=loopzoo.available())
def topology(request: pytest.FixtureRequest) -> str:
    """Every registered topology name, so a new topology is covered without new tests."""
    return request.param
