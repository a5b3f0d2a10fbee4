"""The examples in the topology docstrings run and print what they claim."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = [
    "loopzoo.diagnostics",
    "loopzoo.topologies",
    "loopzoo.topologies._activations",
    "loopzoo.topologies._budget",
    "loopzoo.topologies._elman",
    "loopzoo.topologies._options",
    "loopzoo.topologies.deep_transition",
    "loopzoo.topologies.hidden_feedback",
    "loopzoo.topologies.output_feedback",
    "loopzoo.topologies.residual_skip",
    "loopzoo.topologies.stacked",
    "loopzoo.topologies.torch_gated",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0
