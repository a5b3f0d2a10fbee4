"""Output feedback: teacher forcing (Williams & Zipser 1989), free running, scheduled sampling
(Bengio et al. 2015: one coin per time step and sequence), and what is fed back for classes."""

from __future__ import annotations

import pytest
import torch

import loopzoo
from loopzoo.topologies import _kernels

B, T, IN, H, OUT = 3, 6, 2, 5, 4
TOL = {"atol": 1e-10, "rtol": 1e-8}


def _model(**options):
    torch.manual_seed(0)
    model = loopzoo.create("output-feedback", input_size=IN, output_size=OUT, hidden_size=H,
                           **options)
    return model.double()


def _graph_size(tensor: torch.Tensor) -> int:
    """Number of autograd nodes behind ``tensor``."""
    seen, stack = set(), [tensor.grad_fn]
    while stack:
        node = stack.pop()
        if node is None or node in seen:
            continue
        seen.add(node)
        stack.extend(next_fn for next_fn, _ in node.next_functions)
    return len(seen)


@pytest.mark.parametrize("kind", ["real", "classes"])
def test_teacher_forcing_feeds_the_previous_target(kind: str) -> None:
    """Stepping with the state set to the previous target reproduces the batched pass."""
    model = _model(output_kind=kind)
    x = torch.randn(B, T, IN, dtype=torch.float64)
    if kind == "classes":
        ids = torch.randint(0, OUT, (B, T))
        targets, fed = ids, torch.nn.functional.one_hot(ids, OUT).double()
    else:
        targets = fed = torch.randn(B, T, OUT, dtype=torch.float64)
    start = (torch.randn(B, OUT, dtype=torch.float64),)
    y, (final,) = model(x, start, targets=targets, teacher_forcing=1.0)
    previous = start[0]
    for t in range(T):
        y_t, _ = model.step(x[:, t], (previous,))
        torch.testing.assert_close(y[:, t], y_t, **TOL)
        previous = fed[:, t]
    torch.testing.assert_close(final, fed[:, -1], **TOL)


def test_class_ids_equal_one_hot_targets() -> None:
    model = _model(output_kind="classes")
    x, ids = torch.randn(B, T, IN, dtype=torch.float64), torch.randint(0, OUT, (B, T))
    y_ids, _ = model(x, targets=ids)
    y_hot, _ = model(x, targets=torch.nn.functional.one_hot(ids, OUT).double())
    torch.testing.assert_close(y_ids, y_hot, **TOL)


def test_teacher_forcing_has_no_time_loop() -> None:
    """The autograd graph of the teacher-forced pass does not grow with T; free running's plain
    loop does (its compiled loop is one graph node whatever T)."""
    model = _model()
    sizes = {}
    for steps in (4, 40):
        x = torch.randn(B, steps, IN, dtype=torch.float64)
        targets = torch.randn(B, steps, OUT, dtype=torch.float64)
        forced, _ = model(x, targets=targets, teacher_forcing=1.0)
        with _kernels.forced(False):
            free, _ = model(x, teacher_forcing=0.0)
        sizes[steps] = (_graph_size(forced), _graph_size(free))
    assert sizes[4][0] == sizes[40][0]
    assert sizes[40][1] > 5 * sizes[4][1]


def test_teacher_forcing_default_follows_targets() -> None:
    model = _model()
    x, targets = torch.randn(B, T, IN, dtype=torch.float64), torch.randn(B, T, OUT).double()
    torch.testing.assert_close(model(x, targets=targets)[0],
                               model(x, targets=targets, teacher_forcing=1.0)[0], **TOL)
    torch.testing.assert_close(model(x)[0], model(x, teacher_forcing=0.0)[0], **TOL)
    torch.testing.assert_close(model(x, targets=targets, teacher_forcing=0.0)[0], model(x)[0],
                               **TOL)


def test_scheduled_sampling_flips_one_coin_per_step_and_sequence() -> None:
    """Recover each fed value from the next output: the target is fed at about a share p of
    (step, sequence) pairs, and both choices occur within a step and within a sequence."""
    model = _model()
    batch, steps, p = 64, 20, 0.3
    x = torch.randn(batch, steps, IN, dtype=torch.float64)
    targets = torch.randn(batch, steps, OUT, dtype=torch.float64)
    torch.manual_seed(11)
    y, _ = model(x, targets=targets, teacher_forcing=p)
    fed_target = torch.zeros(batch, steps - 1, dtype=torch.bool)
    for t in range(1, steps):
        with_target, _ = model.step(x[:, t], (targets[:, t - 1],))
        with_own, _ = model.step(x[:, t], (y[:, t - 1],))
        is_target = (y[:, t] - with_target).abs().amax(-1) < 1e-12
        is_own = (y[:, t] - with_own).abs().amax(-1) < 1e-12
        assert bool((is_target ^ is_own).all())
        fed_target[:, t - 1] = is_target
    share = fed_target.double().mean().item()
    # Binomial(64 * 19, 0.3): standard deviation about 0.013; allow five of them.
    assert abs(share - p) < 0.065
    assert bool((fed_target.any(0) & ~fed_target.all(0)).any())  # mixed within a step
    assert bool((fed_target.any(1) & ~fed_target.all(1)).any())  # mixed within a sequence


@pytest.mark.parametrize("fed_back", ["distribution", "onehot"])
def test_free_running_class_feedback(fed_back: str) -> None:
    model = _model(output_kind="classes", fed_back=fed_back)
    x = torch.randn(B, T, IN, dtype=torch.float64)
    y, (state,) = model(x)
    last = y[:, -1]
    if fed_back == "distribution":
        torch.testing.assert_close(state, last.softmax(-1), **TOL)
    else:
        torch.testing.assert_close(
            state, torch.nn.functional.one_hot(last.argmax(-1), OUT).double(), **TOL
        )


def test_detached_feedback_cuts_the_gradient_path_only() -> None:
    value, detached = _model(fed_back="value"), _model(fed_back="detached")
    x = torch.randn(B, T, IN, dtype=torch.float64, requires_grad=True)
    y_value, _ = value(x)
    y_detached, _ = detached(x)
    torch.testing.assert_close(y_value, y_detached, **TOL)  # same numbers
    (g_value,) = torch.autograd.grad(y_value[:, -1].sum(), x)
    (g_detached,) = torch.autograd.grad(y_detached[:, -1].sum(), x)
    assert bool((g_detached[:, :-1] == 0).all())  # only the last input reaches the last output
    assert bool((g_value[:, :-1] != 0).any())


def _line(history: torch.Tensor, t: int, depth: int) -> torch.Tensor:
    """The state before step t: fed values of steps t-1, ..., t-D, newest first; history[:, j]
    is the value of step j - D (the carried line oldest first, then the fed values)."""
    return history[:, t : t + depth].flip(1).reshape(history.shape[0], -1)


@pytest.mark.parametrize("delay", [2, [1, 3, 2, 1]])
def test_delayed_teacher_forcing_feeds_the_measured_value_d_steps_back(delay) -> None:
    """With delay d, step t is fed the target of step t - d: a forecast h steps ahead is measured
    h steps later (series-parallel model, Narendra & Parthasarathy 1990), never earlier."""
    model = _model(delay=delay)
    depth = max(delay) if isinstance(delay, list) else delay
    x = torch.randn(B, T, IN, dtype=torch.float64)
    targets = torch.randn(B, T, OUT, dtype=torch.float64)
    start = torch.randn(B, depth * OUT, dtype=torch.float64)
    assert model.state_sizes() == (depth * OUT,)
    y, (final,) = model(x, (start,), targets=targets, teacher_forcing=1.0)
    history = torch.cat([start.view(B, depth, OUT).flip(1), targets], dim=1)
    for t in range(T):
        y_t, _ = model.step(x[:, t], (_line(history, t, depth),))
        torch.testing.assert_close(y[:, t], y_t, **TOL)
    torch.testing.assert_close(final, _line(history, T, depth), **TOL)
    # The output at step t does not move when a target of step t - d + 1 or later changes.
    delays = delay if isinstance(delay, list) else [delay] * OUT
    for channel, d in enumerate(delays):
        changed = targets.clone()
        changed[:, T - d :, channel] += 1.0
        moved, _ = model(x, (start,), targets=changed, teacher_forcing=1.0)
        torch.testing.assert_close(moved, y, **TOL)


@pytest.mark.parametrize("delay", [2, [1, 3, 2, 1]])
def test_delayed_free_running_feeds_its_own_output_d_steps_back(delay) -> None:
    model = _model(delay=delay)
    x = torch.randn(B, T, IN, dtype=torch.float64)
    y, (final,) = model(x, teacher_forcing=0.0)
    state = model.init_state(B)
    for t in range(T):
        y_t, state = model.step(x[:, t], state)
        torch.testing.assert_close(y[:, t], y_t, **TOL)
    torch.testing.assert_close(final, state[0], **TOL)
    if delay == 2:  # nothing fed back yet before step d: the first d outputs ignore W
        fed = model._fed(model.init_state(B)[0])
        assert torch.equal(fed, torch.zeros_like(fed))


def test_delayed_teacher_forcing_holds_the_line_past_each_length() -> None:
    model = _model(delay=3)
    x, targets = torch.randn(B, T, IN, dtype=torch.float64), torch.randn(B, T, OUT).double()
    start = torch.randn(B, 3 * OUT, dtype=torch.float64)
    lengths = torch.tensor([T, 2, 1])
    _, (final,) = model(x, (start,), targets=targets, teacher_forcing=1.0, lengths=lengths)
    for row, length in enumerate(lengths.tolist()):
        _, (alone,) = model(x[row : row + 1, :length], (start[row : row + 1],),
                            targets=targets[row : row + 1, :length], teacher_forcing=1.0)
        torch.testing.assert_close(final[row : row + 1], alone, **TOL)


@pytest.mark.parametrize(("options", "message"), [
    ({"delay": 0}, "delay"),
    ({"delay": [1, 2]}, "one delay per output channel"),
    ({"delay": [1, 2, 3, 4], "output_kind": "classes"}, "one integer for classes"),
    ({"delay": True}, "delay"),
])
def test_bad_delays_are_refused(options, message) -> None:
    with pytest.raises(ValueError, match=message):
        _model(**options)


def test_equal_delays_are_stored_as_one_number() -> None:
    assert _model(delay=[2, 2, 2, 2]).options["delay"] == 2
