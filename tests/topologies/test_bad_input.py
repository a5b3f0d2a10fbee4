"""Bad input gets a clear error naming the argument, the value and what is accepted."""

from __future__ import annotations

import re

import pytest
import torch

import loopzoo
from loopzoo.topologies import TOPOLOGIES

NAMES = loopzoo.available()
SIZES = {"input_size": 3, "output_size": 2, "hidden_size": 4}


def _model(name: str = "hidden-feedback", **options):
    return loopzoo.create(name, **SIZES, **options)


def test_unknown_topology_lists_the_names() -> None:
    with pytest.raises(ValueError, match="unknown topology 'hiden-feedback'") as error:
        loopzoo.create("hiden-feedback", **SIZES)
    for name in NAMES:
        assert name in str(error.value)
    assert "Did you mean 'hidden-feedback'" in str(error.value)


@pytest.mark.parametrize("name", NAMES)
def test_unknown_option_is_refused_with_the_accepted_list(name: str) -> None:
    with pytest.raises(ValueError, match="unknown option\\(s\\) 'colour'") as error:
        loopzoo.create(name, **SIZES, colour="red")
    for option in TOPOLOGIES.get(name).option_specs:
        assert option in str(error.value)


@pytest.mark.parametrize(
    ("name", "option"),
    [(n, o) for n in NAMES for o in TOPOLOGIES.get(n).option_specs],
)
def test_every_option_is_validated(name: str, option: str) -> None:
    for bad in (object(), "not-a-valid-value", -3, float("nan")):
        with pytest.raises(ValueError, match=f"option {option} = .* is invalid; accepted: "):
            loopzoo.create(name, **SIZES, **{option: bad})


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("field", ["input_size", "output_size", "hidden_size"])
@pytest.mark.parametrize("bad", [0, -1, 2.5, True, "8"])
def test_non_positive_or_non_integer_sizes(name: str, field: str, bad) -> None:
    message = f"{field} = {bad!r} is invalid; accepted: an integer >= 1"
    with pytest.raises(ValueError, match=re.escape(message)):
        loopzoo.create(name, **{**SIZES, field: bad})


def test_impossible_sizes_name_the_memory_they_need() -> None:
    # hidden_size 10^7: W_hh alone holds 10^14 floats (400 TB), more than any machine here has.
    with pytest.raises(ValueError, match="cannot build 'hidden-feedback' with input_size=3, "
                                         "output_size=2, hidden_size=10000000: its "
                                         "100,000,060,000,002 parameters"):
        loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=10**7)


@pytest.mark.parametrize("name", NAMES)
def test_sizes_beyond_any_address_space_get_the_memory_message(name: str) -> None:
    # hidden_size 10^9: a gated layer's 4H x H weight has more bytes than a 64-bit size counts.
    with pytest.raises(ValueError, match=f"cannot build '{name}' with .*hidden_size=1000000000: "
                                         ".* do not fit in memory"):
        loopzoo.create(name, input_size=3, output_size=2, hidden_size=10**9)


@pytest.mark.parametrize(
    ("name", "options", "message"),
    [
        ("stacked", {"num_layers": 1, "dropout": 0.2}, "needs num_layers >= 2"),
        ("lstm", {"dropout": 0.2}, "needs num_layers >= 2"),
        ("stacked", {"dropout": 1.0}, r"dropout = 1.0 is invalid; accepted: .* in \[0.0, 1.0\)"),
        ("deep-transition", {"transition_depth": 1, "shortcut": True}, "transition_depth >= 2"),
        ("deep-transition", {"shortcut": 1}, "shortcut = 1 is invalid; accepted: true or false"),
        ("residual-skip", {"mode": "gated", "scale": 0.5}, "applies only to mode='scaled'"),
        ("residual-skip", {"scale": 0.0}, r"scale = 0.0 is invalid; accepted: .* in \(0.0, 1.0\]"),
        ("output-feedback", {"output_kind": "classes", "fed_back": "value"}, "does not fit"),
        ("output-feedback", {"fed_back": "onehot"}, "accepted: 'value', 'detached'"),
        ("output-feedback", {"output_kind": "classes", "output_size": 1},
         r"needs output_size >= 2 \(one logit per class\)"),
        ("hidden-feedback", {"nonlinearity": "sigmoid"}, "one of 'tanh', 'relu'"),
    ],
)
def test_invalid_option_combinations(name: str, options: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        loopzoo.create(name, **{**SIZES, **options})


@pytest.mark.parametrize("name", NAMES)
def test_wrong_input_rank_features_dtype_and_values(name: str) -> None:
    model = _model(name)
    with pytest.raises(ValueError, match=r"x must have shape \(B, T, 3\), got shape \(5, 3\)"):
        model(torch.randn(5, 3))
    with pytest.raises(ValueError, match="4 features .* input_size is 3"):
        model(torch.randn(2, 5, 4))
    with pytest.raises(TypeError, match="x must be a floating-point tensor, got dtype torch.int64"):
        model(torch.ones(2, 5, 3, dtype=torch.long))
    with pytest.raises(TypeError, match="x has dtype torch.float64 but the model's parameters"):
        model(torch.randn(2, 5, 3, dtype=torch.float64))
    with pytest.raises(TypeError, match="x must be a torch.Tensor"):
        model([[[0.0, 0.0, 0.0]]])
    with pytest.raises(ValueError, match="at least one time step"):
        model(torch.randn(2, 0, 3))
    bad = torch.randn(2, 5, 3)
    bad[1, 2, 0] = float("nan")
    with pytest.raises(ValueError, match="x contains 1 non-finite value"):
        model(bad)
    with pytest.raises(ValueError, match=r"x_t must have shape \(B, 3\)"):
        model.step(torch.randn(2, 5, 3))
    with pytest.raises(ValueError, match="x_t contains 1 non-finite value"):
        model.step(bad[:, 2])


@pytest.mark.parametrize("name", NAMES)
def test_lengths_out_of_range_or_wrong_shape(name: str) -> None:
    model, x = _model(name), torch.randn(2, 5, 3)
    with pytest.raises(ValueError, match=r"lengths must lie in \[0, T\] = \[0, 5\], got values "
                                         "from 1 to 6"):
        model(x, lengths=torch.tensor([1, 6]))
    with pytest.raises(ValueError, match="from -1 to 5"):
        model(x, lengths=[-1, 5])
    with pytest.raises(ValueError, match=r"lengths must have shape \(B,\) = \(2,\), got shape"):
        model(x, lengths=torch.tensor([[5, 5]]))
    with pytest.raises(TypeError, match="lengths must hold integers, got dtype torch.float32"):
        model(x, lengths=torch.tensor([5.0, 5.0]))


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("bad", [1.5, -0.1, float("nan"), True, "1"])
def test_teacher_forcing_outside_unit_interval(name: str, bad) -> None:
    model = _model(name)
    with pytest.raises(ValueError, match=r"teacher_forcing must be a number in \[0, 1\]"):
        model(torch.randn(2, 5, 3), targets=torch.randn(2, 5, 2), teacher_forcing=bad)


@pytest.mark.parametrize("name", NAMES)
def test_state_of_the_wrong_shape_count_or_dtype(name: str) -> None:
    model, x = _model(name), torch.randn(2, 5, 3)
    state = model.init_state(2)
    n = state[0].shape[1]
    with pytest.raises(ValueError, match=f"state\\[0\\] must have shape \\(2, {n}\\)"):
        model(x, (torch.zeros(3, n), *state[1:]))
    with pytest.raises(ValueError, match=f"must be a tuple of {len(state)} tensor"):
        model(x, (*state, state[0]))
    with pytest.raises(TypeError, match="state\\[0\\] has dtype torch.float64"):
        model(x, (state[0].double(), *state[1:]))
    with pytest.raises(ValueError, match="state\\[0\\] must have shape"):
        model.step(x[:, 0], (torch.zeros(2, n + 1), *state[1:]))
    nan_state = (torch.full((2, n), float("nan")), *state[1:])
    with pytest.raises(ValueError, match=f"state\\[0\\] contains {2 * n} non-finite"):
        model(x, nan_state)
    with pytest.raises(ValueError, match=f"state\\[0\\] contains {2 * n} non-finite"):
        model.step(x[:, 0], nan_state)
    with pytest.raises(ValueError, match="batch_size must be a positive integer"):
        model.init_state(0)


def test_targets_of_the_wrong_shape_or_range() -> None:
    real = _model("output-feedback")
    x = torch.randn(2, 5, 3)
    with pytest.raises(ValueError, match=r"targets must have shape \(2, 5, 2\) float, got shape"):
        real(x, targets=torch.randn(2, 4, 2))
    with pytest.raises(ValueError, match=r"targets must have shape \(2, 5, 2\)"):
        real(x, targets=torch.zeros(2, 5, dtype=torch.long))  # class ids need output_kind=classes
    with pytest.raises(TypeError, match="targets must be a torch.Tensor"):
        real(x, targets=[[0.0]])
    with pytest.raises(ValueError, match="teacher_forcing=0.5 needs targets"):
        real(x, teacher_forcing=0.5)
    nan_targets = torch.randn(2, 5, 2)
    nan_targets[0, 0, 0] = float("nan")
    with pytest.raises(ValueError, match="targets contains 1 non-finite value"):
        real(x, targets=nan_targets)
    classes = _model("output-feedback", output_kind="classes")
    with pytest.raises(ValueError, match=r"class targets must be integer ids in \[0, 2\), got "
                                         "values from 0 to 2"):
        classes(x, targets=torch.tensor([[0, 1, 2, 0, 0], [0, 0, 0, 0, 0]]))
    with pytest.raises(ValueError, match=r"or \(2, 5\) class ids in \[0, 2\)"):
        classes(x, targets=torch.zeros(2, 4, dtype=torch.long))


def test_width_for_budget_refuses_impossible_budgets() -> None:
    # hidden-feedback with I=3, O=2 at H=1: 3 + 1 + 1 (cell) + 2 + 2 (readout) = 9 parameters.
    with pytest.raises(ValueError, match="params=8 is below the smallest 'hidden-feedback' model"
                                         ".*9 parameters at hidden_size=1"):
        loopzoo.width_for_budget("hidden-feedback", params=8, input_size=3, output_size=2)
    with pytest.raises(ValueError, match="params must be a positive integer"):
        loopzoo.width_for_budget("stacked", params=0, input_size=3, output_size=2)
    with pytest.raises(ValueError, match="solves for hidden_size"):
        loopzoo.width_for_budget("stacked", params=900, input_size=3, output_size=2, hidden_size=4)
    with pytest.raises(ValueError, match="unknown topology"):
        loopzoo.width_for_budget("nope", params=900, input_size=3, output_size=2)
    with pytest.raises(ValueError, match="unknown option"):
        loopzoo.width_for_budget("stacked", params=900, input_size=3, output_size=2, depth=2)
