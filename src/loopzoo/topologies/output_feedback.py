"""output-feedback: the Jordan network (Jordan 1986): an earlier output drives the state.

    h_t = f(U x_t + W o_{t-d} + b)        d = delay, per output channel (default 1)
    y_t = V h_t + c
    o_t = the fed-back value: the target y*_t (teacher forcing, Williams & Zipser 1989), or the
          model's own output: y_t for real outputs, softmax(y_t) or onehot(argmax y_t) for classes

With d = 1 this is Jordan's network. A larger d suits targets that are measured only d steps
later (a forecast h steps ahead is observed after h): under teacher forcing the model is then
fed the measured y*_{t-d} that a deployed model also has (the series-parallel model of Narendra &
Parthasarathy 1990), and free running its own estimate y_{t-d} of the same value (their parallel
model).

Teacher forcing (teacher_forcing=1.0) makes every step independent, so the whole sequence runs as
one batched pass: o_{t-d} is the target shifted d steps, with the carried state before that.
Free running (0.0) and scheduled sampling (Bengio et al. 2015; strictly between: one coin per
time step and sequence picks target or own output as o_t) run the time loop.

Shapes: x (B, T, I), h_t (B, H), y (B, T, O); targets (B, T, O) real, or for classes (B, T)
class ids / (B, T, O) probabilities. State: (o,) of shape (B, D * O), D = the largest delay: the
last D fed values o_{t-1}, ..., o_{t-D}, newest first (D = 1: just o_{t-1}).
"""

from __future__ import annotations

from typing import Any

import torch
from torch import Tensor, nn

from loopzoo import _checks as checks
from loopzoo.topologies import _kernels
from loopzoo.topologies._activations import batched_tanh
from loopzoo.topologies._base import (
    RecurrentTopology,
    State,
    activation,
    batch_first,
    check_finite,
    make_readout,
    project_time_major,
    register,
    scan,
    time_major_mask,
    uniform_init,
)
from loopzoo.topologies._feedback_loop import feedback_scan
from loopzoo.topologies._options import NONLINEARITY, Option, choice
from loopzoo.topologies._search import RealRange
from loopzoo.topologies._teacher_forced import Workspace, teacher_forced_layer

__all__ = ["OutputFeedback"]

_FED_BACK = {"real": ("value", "detached"), "classes": ("distribution", "onehot")}
_MAX_DELAY = 100_000


def _check_delay(name: str, value: Any) -> int | list[int]:
    """A delay d >= 1 for every channel, or a list with one per output channel."""
    accepted = f"an integer in [1, {_MAX_DELAY}] or a non-empty list of them (one per output)"

    def one(item: Any) -> int:
        try:
            return checks.integer(name, item, minimum=1, maximum=_MAX_DELAY)
        except ValueError:
            raise checks.invalid(name, value, accepted) from None

    if isinstance(value, (list, tuple)):
        if not value:
            raise checks.invalid(name, value, accepted)
        delays = [one(item) for item in value]
        # One delay for every channel is stored as that number.
        return delays[0] if len(set(delays)) == 1 else delays
    return one(value)


@register("output-feedback")
class OutputFeedback(RecurrentTopology):
    """Jordan network with teacher forcing, free running and scheduled sampling.

    Options: nonlinearity ('tanh' | 'relu'); output_kind ('real' | 'classes': y are logits);
    fed_back, what the model feeds back of its own output: for real 'value' (default) or
    'detached' (the value without a gradient path); for classes 'distribution' (softmax, default)
    or 'onehot' (of the argmax). Teacher forcing always feeds the (one-hot) target.
    delay: d, the output of step t - d is fed into step t (default 1); a list gives one per
    output channel (real outputs), e.g. the horizons of a multi-horizon forecast.

    >>> import loopzoo, torch
    >>> model = loopzoo.create("output-feedback", input_size=3, output_size=2, hidden_size=8)
    >>> x, t = torch.randn(4, 10, 3), torch.randn(4, 10, 2)
    >>> y, (o,) = model(x, targets=t)               # teacher forcing: one batched pass
    >>> y_free, _ = model(x, teacher_forcing=0.0)   # free running
    >>> y.shape, o.shape
    (torch.Size([4, 10, 2]), torch.Size([4, 2]))
    """

    feeds_back_output = True
    option_specs = {
        "nonlinearity": NONLINEARITY,
        "output_kind": Option("real", choice("real", "classes"), "real values or class logits"),
        "fed_back": Option(
            "auto", choice("auto", *_FED_BACK["real"], *_FED_BACK["classes"]),
            "own output fed back when free running ('auto': value / distribution)",
        ),
        "delay": Option(1, _check_delay, "steps between an output and the step it is fed into"),
    }
    # "feedback.<key>" names a key of the harness's teacher-forcing schedule (model.feedback):
    # k of the inverse-sigmoid decay e_i = k / (k + exp(i / k)) (Bengio et al. 2015), which sets
    # how many training steps pass before the model mostly feeds back its own output.
    tunable = {
        "feedback.k": RealRange(5.0, 500.0, log=True,
                                only_if={"feedback.mode": ("scheduled",),
                                         "feedback.schedule": ("inverse_sigmoid",)}),
    }

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        kind, fed_back = self.options["output_kind"], self.options["fed_back"]
        if kind == "classes" and self.output_size < 2:
            raise ValueError(
                f"'output-feedback' with output_kind='classes' needs output_size >= 2 (one logit "
                f"per class), got output_size={self.output_size}; use output_kind='real' for one "
                "real output"
            )
        if fed_back == "auto":
            fed_back = self.options["fed_back"] = _FED_BACK[kind][0]
        if fed_back not in _FED_BACK[kind]:
            raise ValueError(
                f"'output-feedback' option fed_back={fed_back!r} does not fit "
                f"output_kind={kind!r}; accepted: {', '.join(map(repr, _FED_BACK[kind]))}"
            )
        delay = self.options["delay"]
        delays = delay if isinstance(delay, list) else [delay] * self.output_size
        if len(delays) != self.output_size or (kind == "classes" and isinstance(delay, list)):
            raise ValueError(
                f"'output-feedback' option delay={delay!r} needs one delay per output channel "
                f"({self.output_size}) for real outputs, one integer for classes"
            )
        self.delays = tuple(delays)
        self.depth = max(delays)  # D: fed values kept in the state
        # Position of o_{t-d_c}[c] in the state (block d_c - 1, newest first), per channel.
        self.register_buffer(
            "_read", torch.tensor([(d - 1) * self.output_size + c for c, d in enumerate(delays)]),
            persistent=False,
        )
        self.activation = activation(self.options["nonlinearity"])
        self.weight_ih = nn.Parameter(torch.empty(self.hidden_size, self.input_size))
        self.weight_oh = nn.Parameter(torch.empty(self.hidden_size, self.output_size))
        self.bias = nn.Parameter(torch.empty(self.hidden_size))
        self.readout = make_readout(self.hidden_size, self.output_size)
        self._workspace = Workspace()  # the teacher-forced pass's activations, reused each step
        uniform_init(self, self.hidden_size)

    def state_sizes(self) -> tuple[int, ...]:
        return (self.depth * self.output_size,)

    def _fed(self, line: Tensor) -> Tensor:
        """o_{t-d} (B, O) from the state's line of fed values (B, D * O)."""
        if self.depth == 1:
            return line
        if len(set(self.delays)) == 1:
            return line[:, -self.output_size:]
        return line.index_select(1, self._read)

    def _push(self, line: Tensor, fed: Tensor) -> Tensor:
        """The line after step t: o_t enters (newest first), the oldest value leaves."""
        if self.depth == 1:
            return fed
        return torch.cat([fed, line[:, : -self.output_size]], dim=1)

    def _feed(self, y: Tensor) -> Tensor:
        """The model's own output as it is fed back."""
        fed_back = self.options["fed_back"]
        if fed_back == "value":
            return y
        if fed_back == "detached":
            return y.detach()
        if fed_back == "distribution":
            return torch.softmax(y, dim=-1)
        return torch.zeros_like(y).scatter(-1, y.argmax(dim=-1, keepdim=True), 1.0)

    def _check_targets(self, targets: Any, batch: int, steps: int) -> Tensor:
        out = self.output_size
        classes = self.options["output_kind"] == "classes"
        accepted = f"({batch}, {steps}, {out}) float" + (
            f" or ({batch}, {steps}) class ids in [0, {out})" if classes else ""
        )
        if not isinstance(targets, Tensor):
            raise TypeError(f"targets must be a torch.Tensor of shape {accepted}, got "
                            f"{type(targets).__name__}")
        shape = tuple(targets.shape)
        if classes and shape == (batch, steps) and not targets.is_floating_point():
            low, high = int(targets.min()), int(targets.max())
            if targets.dtype == torch.bool or low < 0 or high >= out:
                raise ValueError(
                    f"class targets must be integer ids in [0, {out}), got values from {low} "
                    f"to {high} (dtype {targets.dtype})"
                )
            dtype = self._reference_parameter().dtype
            return torch.nn.functional.one_hot(targets.long(), out).to(dtype)
        if shape != (batch, steps, out):
            raise ValueError(f"targets must have shape {accepted}, got shape {shape}")
        self._check_dtype("targets", targets)
        check_finite("targets", targets)
        return targets

    def _readout_step(self, u_t: Tensor, fed: Tensor) -> Tensor:
        """y_t from u_t = U x_t + b (B, H) and the fed-back o_{t-1} (B, O)."""
        return self.readout(self.activation(torch.addmm(u_t, fed, self.weight_oh.t())))

    def forward_unchecked(
        self,
        x: Tensor,
        state: State,
        valid: Tensor | None = None,
        targets: Tensor | None = None,
        teacher_forcing: float = 0.0,
    ) -> tuple[Tensor, State]:
        """Free running, teacher forced (``teacher_forcing=1``) or scheduled sampling between."""
        if teacher_forcing == 1.0:
            return self._teacher_forced(x, state, valid, targets)
        u = project_time_major(x, self.weight_ih, self.bias)  # (T, B, H)
        hidden = self.hidden_size
        coins = None
        if teacher_forcing > 0.0:
            # One coin per time step and sequence: 1 feeds the target, 0 the model's own output.
            draws = torch.rand(u.shape[0], u.shape[1], 1, device=x.device, dtype=u.dtype)
            coins = draws < teacher_forcing
        if _kernels.applies(u):  # compiled loop (_feedback_loop.py)
            ys, line = feedback_scan(
                u, state[0], self.weight_oh, self.readout,
                None if coins is None else targets.transpose(0, 1),
                None if coins is None else coins[..., 0], valid, self.delays,
                fed_back=self.options["fed_back"], nonlinearity=self.options["nonlinearity"],
            )
            return batch_first(ys), (line,)
        if coins is not None:
            u = torch.cat([u, targets.transpose(0, 1), coins.to(u.dtype)], dim=-1)  # (T, B, H+O+1)

        def cell(step_input: Tensor, carried: State) -> tuple[Tensor, State]:
            y_t = self._readout_step(step_input[:, :hidden], self._fed(carried[0]))
            fed = self._feed(y_t)
            if teacher_forcing > 0.0:
                target_t, coin_t = step_input[:, hidden:-1], step_input[:, -1:]
                fed = torch.where(coin_t > 0.0, target_t, fed)
            return y_t, (self._push(carried[0], fed),)

        ys, final = scan(cell, u, state, time_major_mask(valid))
        return batch_first(ys), final

    def _teacher_forced(
        self, x: Tensor, state: State, valid: Tensor | None, targets: Tensor
    ) -> tuple[Tensor, State]:
        """All steps at once: o_{t-d} = targets[:, t-d], from the carried state for t < d."""
        batch, steps, out, depth = x.shape[0], x.shape[1], self.output_size, self.depth
        # history[:, j] is the value fed at step j - D: the carried line oldest first, then the
        # targets. Slicing after the concatenation keeps T symbolic under torch.export (slicing
        # the targets first made the exported program guard on the traced length).
        carried = state[0].view(batch, depth, out).flip(1)
        history = torch.cat([carried, targets], dim=1)  # (B, D + T, O)
        if len(set(self.delays)) == 1:
            delay = self.delays[0]
            previous = history[:, depth - delay : -delay]  # (B, T, O)
        else:
            previous = torch.stack(
                [history[:, depth - d : -d, c] for c, d in enumerate(self.delays)], dim=-1
            )
        inputs = torch.cat([x, previous], dim=-1).view(batch * steps, -1)  # (B*T, I + O)
        weight = torch.cat([self.weight_ih, self.weight_oh], dim=1)  # (H, I + O)
        nonlinearity = self.options["nonlinearity"]
        if _kernels.tracing():  # exported / compiled graphs: the same formula in plain ops
            pre = torch.addmm(self.bias, inputs, weight.t())  # (B*T, H)
            h = torch.relu(pre) if nonlinearity == "relu" else batched_tanh(pre)
            y = self.readout(h)
        else:  # row blocks, h kept in the layer's workspace (_teacher_forced.py)
            y = teacher_forced_layer(
                inputs, weight, self.bias, self.readout.weight, self.readout.bias,
                nonlinearity=nonlinearity, workspace=self._workspace,
            )
        y = y.view(batch, steps, out)
        # The final line: the values of the last D valid steps, newest first.
        if valid is None:
            return y, (history[:, -depth:].flip(1).reshape(batch, depth * out),)
        lengths = valid.sum(dim=1)  # step s sits at history index s + D
        rows = (lengths.unsqueeze(1) + depth - 1) - torch.arange(depth, device=x.device)
        line = history[torch.arange(batch, device=x.device).unsqueeze(1), rows]  # (B, D, O)
        return y, (line.reshape(batch, depth * out),)

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        line = state[0]
        y_t = self._readout_step(torch.addmm(self.bias, x_t, self.weight_ih.t()), self._fed(line))
        return y_t, (self._push(line, self._feed(y_t)),)
