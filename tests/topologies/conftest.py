"""Topology cases for the registry-driven tests: every registered name with its defaults, plus
non-default options worth exercising. A test that takes ``topology_case`` runs once per case;
``gradient_case`` leaves out options that cut the gradient on purpose, and
``feedback_gradient_case`` keeps of those only topologies that feed back their output."""

from __future__ import annotations

import pytest

import loopzoo
from loopzoo.topologies import TOPOLOGIES

# Non-default options per topology (the defaults are always a case). A new topology is covered
# with its defaults without an entry here.
VARIANTS: dict[str, list[dict]] = {
    "hidden-feedback": [{"nonlinearity": "relu"}, {"nonlinearity": "relu", "init": "identity"}],
    "output-feedback": [
        {"output_kind": "classes"},
        {"output_kind": "classes", "fed_back": "onehot"},
        {"nonlinearity": "relu", "fed_back": "detached"},
        {"delay": 3},
        {"delay": 2, "output_kind": "classes"},
    ],
    "stacked": [{"num_layers": 3, "dropout": 0.3}, {"num_layers": 1, "nonlinearity": "relu"}],
    "deep-transition": [
        {"transition_depth": 3, "output_depth": 2, "shortcut": True},
        {"transition_depth": 1, "output_depth": 3},
    ],
    "residual-skip": [{"num_layers": 2}, {"mode": "scaled"},
                      {"mode": "scaled", "scale": 0.5, "num_layers": 2}],
    "lstm": [{"num_layers": 2, "dropout": 0.2}],
    "gru": [{"num_layers": 2}],
}


# Options whose gradient is truncated on purpose, so finite differences disagree with it by
# design (their own test checks the cut): left out of the gradcheck cases.
CUT_GRADIENT = {("output-feedback", "fed_back", "detached")}


def _cuts_gradient(name: str, options: dict) -> bool:
    return any((name, key, value) in CUT_GRADIENT for key, value in options.items())


def topology_cases(*, feedback_only: bool = False, exact_gradient: bool = False) -> list:
    cases = []
    for name in loopzoo.available():
        if feedback_only and not TOPOLOGIES.get(name).feeds_back_output:
            continue
        for options in [{}, *VARIANTS.get(name, [])]:
            if exact_gradient and _cuts_gradient(name, options):
                continue
            label = ",".join(f"{k}={v}" for k, v in options.items()) or "defaults"
            cases.append(pytest.param((name, options), id=f"{name}[{label}]"))
    return cases


def pytest_generate_tests(metafunc: pytest.Metafunc) -> None:
    if "topology_case" in metafunc.fixturenames:
        metafunc.parametrize("topology_case", topology_cases())
    if "gradient_case" in metafunc.fixturenames:  # cases with the full gradient
        metafunc.parametrize("gradient_case", topology_cases(exact_gradient=True))
    if "feedback_gradient_case" in metafunc.fixturenames:  # ... of topologies fed their targets
        metafunc.parametrize(
            "feedback_gradient_case", topology_cases(feedback_only=True, exact_gradient=True)
        )
