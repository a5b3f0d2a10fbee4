"""The module contract (README "Using the modules"), driven by the registry: every topology.

Hypothesis draws sizes, lengths and split points; comparisons run in float64 so only rounding
differences are tolerated.
"""

from __future__ import annotations

import copy
import pickle

import pytest
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import loopzoo
from loopzoo.topologies import TOPOLOGIES, parameter_count

NAMES = loopzoo.available()
TOL = {"atol": 1e-10, "rtol": 1e-8}
SETTINGS = settings(
    max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True
)

sizes = st.fixed_dictionaries(
    {
        "batch": st.integers(1, 3),
        "steps": st.integers(1, 6),
        "input_size": st.integers(1, 3),
        "output_size": st.integers(1, 3),
        "hidden_size": st.integers(1, 5),
        "seed": st.integers(0, 2**16),
    }
)


def _build(case: tuple[str, dict], s: dict):
    name, options = case
    torch.manual_seed(s["seed"])
    # Class outputs need one logit per class, at least two.
    outputs = max(2, s["output_size"]) if options.get("output_kind") == "classes" else (
        s["output_size"])
    model = loopzoo.create(
        name, input_size=s["input_size"], output_size=outputs,
        hidden_size=s["hidden_size"], **options,
    ).double()
    x = torch.randn(s["batch"], s["steps"], s["input_size"], dtype=torch.float64)
    targets = torch.randn(s["batch"], s["steps"], outputs, dtype=torch.float64)
    return model.eval(), x, targets


def _close_states(got, want) -> None:
    assert len(got) == len(want)
    for g, w in zip(got, want, strict=True):
        torch.testing.assert_close(g, w, **TOL)


def test_attributes_and_rebuild(topology_case: tuple[str, dict]) -> None:
    name, options = topology_case
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=6, **options)
    assert model.topology == name
    assert (model.input_size, model.output_size, model.hidden_size) == (3, 2, 6)
    assert isinstance(model.feeds_back_output, bool)
    declared = set(TOPOLOGIES.get(name).option_specs)
    assert set(model.options) == {"input_size", "output_size", "hidden_size"} | declared
    assert all(model.options[k] == v for k, v in options.items())
    twin = loopzoo.create(model.topology, **model.options)
    assert twin.options == model.options
    shapes = {k: v.shape for k, v in model.state_dict().items()}
    assert {k: v.shape for k, v in twin.state_dict().items()} == shapes
    state = model.init_state(4)
    assert isinstance(state, tuple) and all(s.shape[0] == 4 and s.dim() == 2 for s in state)
    assert all(bool((s == 0).all()) for s in state)


@SETTINGS
@given(s=sizes)
def test_step_equals_forward(topology_case: tuple[str, dict], s: dict) -> None:
    model, x, _ = _build(topology_case, s)
    y, final = model(x)
    assert y.shape == (s["batch"], s["steps"], model.output_size)
    state, ys = None, []
    for t in range(s["steps"]):
        y_t, state = model.step(x[:, t], state)
        ys.append(y_t)
    torch.testing.assert_close(torch.stack(ys, dim=1), y, **TOL)
    _close_states(state, final)


@SETTINGS
@given(s=sizes, cut=st.floats(0.0, 1.0))
def test_chunked_equals_whole(topology_case: tuple[str, dict], s: dict, cut: float) -> None:
    model, x, targets = _build(topology_case, s)
    k = round(cut * (s["steps"] - 1)) + 1 if s["steps"] > 1 else 1
    for kwargs in ({}, {"targets": targets, "teacher_forcing": 1.0}):
        y, final = model(x, **kwargs)
        if k == s["steps"]:
            continue
        split = {key: (v[:, :k], v[:, k:]) if key == "targets" else (v, v)
                 for key, v in kwargs.items()}
        y1, mid = model(x[:, :k], **{key: v[0] for key, v in split.items()})
        y2, end = model(x[:, k:], mid, **{key: v[1] for key, v in split.items()})
        torch.testing.assert_close(torch.cat([y1, y2], dim=1), y, **TOL)
        _close_states(end, final)


@SETTINGS
@given(s=sizes, data=st.data())
def test_lengths_equal_per_sequence_truncation(
    topology_case: tuple[str, dict], s: dict, data
) -> None:
    model, x, targets = _build(topology_case, s)
    lengths = data.draw(
        st.lists(st.integers(0, s["steps"]), min_size=s["batch"], max_size=s["batch"])
    )
    for kwargs in ({}, {"targets": targets, "teacher_forcing": 1.0}):
        y, final = model(x, lengths=torch.tensor(lengths), **kwargs)
        for b, length in enumerate(lengths):
            assert bool((y[b, length:] == 0).all())
            if length == 0:
                want = model.init_state(1)
            else:
                part = {k: v[b:b + 1, :length] if k == "targets" else v for k, v in kwargs.items()}
                y_b, want = model(x[b:b + 1, :length], **part)
                torch.testing.assert_close(y[b:b + 1, :length], y_b, **TOL)
            _close_states(tuple(f[b:b + 1] for f in final), want)


@SETTINGS
@given(s=sizes, data=st.data())
def test_causal_in_inputs_and_targets(topology_case: tuple[str, dict], s: dict, data) -> None:
    model, x, targets = _build(topology_case, s)
    t = data.draw(st.integers(0, s["steps"] - 1))
    later_x = x.clone()
    later_x[:, t + 1:] += torch.randn_like(later_x[:, t + 1:])
    later_targets = targets.clone()
    later_targets[:, t:] += torch.randn_like(later_targets[:, t:])
    for forcing in (0.0, 0.5, 1.0):
        torch.manual_seed(5)  # scheduled sampling draws the same coins in both runs
        y, _ = model(x, targets=targets, teacher_forcing=forcing)
        torch.manual_seed(5)
        y_later_x, _ = model(later_x, targets=targets, teacher_forcing=forcing)
        torch.manual_seed(5)
        y_later_t, _ = model(x, targets=later_targets, teacher_forcing=forcing)
        torch.testing.assert_close(y_later_x[:, : t + 1], y[:, : t + 1], **TOL)
        torch.testing.assert_close(y_later_t[:, : t + 1], y[:, : t + 1], **TOL)


def test_every_parameter_gets_a_gradient(topology_case: tuple[str, dict]) -> None:
    name, options = topology_case
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=5, **options).train()
    x, targets = torch.randn(4, 6, 3), torch.randn(4, 6, 2)
    for kwargs in ({}, {"targets": targets}):
        model.zero_grad()
        y, state = model(x, lengths=torch.tensor([6, 5, 3, 1]), **kwargs)
        (y.pow(2).sum() + sum(s.pow(2).sum() for s in state)).backward()
        for pname, p in model.named_parameters():
            assert p.grad is not None, f"{name}: {pname} got no gradient"
            assert bool(torch.isfinite(p.grad).all()), f"{name}: {pname} has a non-finite gradient"
            assert bool((p.grad != 0).any()), f"{name}: {pname} has an all-zero gradient"


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("budget", [5_000, 20_000, 120_000])
def test_width_for_budget_within_five_percent(name: str, budget: int) -> None:
    sizes_ = {"input_size": 3, "output_size": 2}
    width = loopzoo.width_for_budget(name, params=budget, **sizes_)
    count = parameter_count(name, hidden_size=width, **sizes_)
    assert abs(count - budget) <= 0.05 * budget
    # Closest of all widths: the neighbours are no nearer.
    for other in (width - 1, width + 1):
        if other >= 1:
            assert abs(parameter_count(name, hidden_size=other, **sizes_) - budget) >= abs(
                count - budget
            )
    # The meta-device count is the real model's count.
    model = loopzoo.create(name, hidden_size=width, **sizes_)
    assert count == sum(p.numel() for p in model.parameters())


def test_width_for_budget_passes_options_through() -> None:
    deep = loopzoo.width_for_budget("stacked", params=50_000, input_size=3, output_size=2,
                                    num_layers=4)
    shallow = loopzoo.width_for_budget("stacked", params=50_000, input_size=3, output_size=2,
                                       num_layers=1)
    assert deep < shallow


@pytest.mark.parametrize("name", [n for n in NAMES if not loopzoo.create(
    n, input_size=1, output_size=1, hidden_size=1).feeds_back_output])
def test_non_feedback_topologies_ignore_targets(name: str) -> None:
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=2, output_size=2, hidden_size=3)
    x = torch.randn(2, 4, 2)
    y, _ = model(x)
    y_t, _ = model(x, targets=torch.randn(2, 4, 2), teacher_forcing=0.3)
    torch.testing.assert_close(y_t, y)


@pytest.mark.parametrize("name", NAMES)
def test_deepcopy_and_pickle_give_the_same_model(name: str) -> None:
    """Trainers and checkpoint code copy and pickle modules; the copies must compute the same."""
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=4)
    x = torch.randn(2, 5, 3)
    y, _ = model(x)
    for twin in (copy.deepcopy(model), pickle.loads(pickle.dumps(model))):
        assert twin.topology == name and twin.options == model.options
        torch.testing.assert_close(twin(x)[0], y, rtol=0, atol=0)
