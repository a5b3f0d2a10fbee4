"""The private base every topology extends, and the topology registry.

The base owns what all topologies share: size and option checks, validation of ``forward`` and
``step`` arguments, masking by ``lengths``, state creation and checks, and the time loop with
length-aware state holding. A topology subclass supplies ``state_sizes``, ``_sequence`` (a whole
sequence) and ``step_unchecked`` (one step), so its file is mostly its equations.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any, ClassVar

import torch
from torch import Tensor, nn

from loopzoo._registry import Registry
from loopzoo.topologies._options import Option, is_real, resolve_options, size
from loopzoo.topologies._search import SearchRange

__all__ = [
    "TOPOLOGIES",
    "RecurrentTopology",
    "State",
    "activation",
    "batch_first",
    "check_finite",
    "hold",
    "make_readout",
    "project_time_major",
    "register",
    "scan",
    "time_major_mask",
    "uniform_init",
]

State = tuple[Tensor, ...]

TOPOLOGIES: Registry[type[RecurrentTopology]] = Registry("topology")


def register(name: str) -> Callable[[type[RecurrentTopology]], type[RecurrentTopology]]:
    """Class decorator: register a topology under ``name`` and record the name on the class."""

    def decorate(cls: type[RecurrentTopology]) -> type[RecurrentTopology]:
        cls.topology = name
        return TOPOLOGIES.register(name)(cls)

    return decorate


def uniform_init(module: nn.Module, hidden_size: int) -> None:
    """Every parameter from U(-1/sqrt(H), 1/sqrt(H)): torch.nn.RNN's default, shared by the zoo."""
    bound = 1.0 / math.sqrt(hidden_size)
    for parameter in module.parameters():
        nn.init.uniform_(parameter, -bound, bound)


def activation(nonlinearity: str) -> Callable[[Tensor], Tensor]:
    """The function named by the ``nonlinearity`` option: torch.tanh or torch.relu."""
    return torch.relu if nonlinearity == "relu" else torch.tanh


def make_readout(
    hidden_size: int, output_size: int, *, depth: int = 1, nonlinearity: str = "tanh"
) -> nn.Module:
    """The readout y = V h + c (an nn.Linear), or with depth > 1 an MLP whose depth - 1 hidden
    layers have width hidden_size (the deep output of Pascanu et al. 2014)."""
    activation = nn.ReLU if nonlinearity == "relu" else nn.Tanh
    layers: list[nn.Module] = []
    for _ in range(depth - 1):
        layers += [nn.Linear(hidden_size, hidden_size), activation()]
    final = nn.Linear(hidden_size, output_size)
    return nn.Sequential(*layers, final) if layers else final


def project_time_major(
    x: Tensor, weight: Tensor, bias: Tensor | None, *, time_major: bool = False
) -> Tensor:
    """x @ weight.T + bias for all steps in one matrix product, laid out time-major.

    x: (B, T, I), or (T, B, I) with time_major=True; weight: (K, I); bias: (K,) or None
    -> (T, B, K), contiguous so that each step is one block of memory.
    """
    if not time_major:
        x = x.transpose(0, 1)
    steps, batch, features = x.shape
    flat = x.reshape(steps * batch, features)
    out = flat @ weight.t() if bias is None else torch.addmm(bias, flat, weight.t())
    return out.view(steps, batch, weight.shape[0])


def time_major_mask(valid: Tensor | None) -> Tensor | None:
    """(B, T) bool -> (T, B, 1) bool, the layout the time loops index per step."""
    return None if valid is None else valid.t().unsqueeze(-1)


def batch_first(y: Tensor) -> Tensor:
    """(T, B, ...) -> contiguous (B, T, ...)."""
    return y.transpose(0, 1).contiguous()


def hold(valid: Tensor | None, new: State, old: State) -> State:
    """The new state where ``valid`` (B, 1) is true, else the old one (past a sequence's end)."""
    if valid is None:
        return new
    return tuple(torch.where(valid, n, o) for n, o in zip(new, old, strict=True))


def scan(
    cell: Callable[[Tensor, State], tuple[Tensor, State]],
    inputs: Tensor,
    state: State,
    valid: Tensor | None,
) -> tuple[Tensor, State]:
    """Run ``cell`` over time-major ``inputs`` (T, B, K); state is held past each length.

    valid: (T, B, 1) bool or None. Returns the stacked per-step outputs (T, B, ...) and the state
    after each sequence's last valid step.
    """
    outputs = []
    # unbind, not inputs[t]: the backward of one index op materialises a full (T, B, K) zero
    # tensor, which made the loop quadratic in T.
    for t, input_t in enumerate(inputs.unbind(0)):
        out, new = cell(input_t, state)
        state = hold(None if valid is None else valid[t], new, state)
        outputs.append(out)
    return torch.stack(outputs), state


def check_finite(name: str, value: Tensor) -> None:
    """Refuse NaN or inf. A finite sum proves all entries finite; only then count the bad ones."""
    if bool(torch.isfinite(value.sum())):
        return
    bad = int((~torch.isfinite(value)).sum())
    if bad:
        raise ValueError(f"{name} contains {bad} non-finite value(s) (NaN or inf); clean the data")


def _shape(shape: Sequence[int | str]) -> str:
    return "(" + ", ".join(str(s) for s in shape) + ")"


class RecurrentTopology(nn.Module):
    """Base of every registered topology: one interface for batch forward, streaming step and state.

    Subclasses set ``option_specs`` and implement ``state_sizes``, ``_sequence`` and
    ``step_unchecked`` (output feedback overrides ``forward_unchecked`` instead of ``_sequence``);
    ``tunable`` declares the options worth tuning and their ranges (``loopzoo.topologies._search``).
    Shapes: B batch, T time, I input_size, O output_size; every state tensor is (B, n).
    """

    topology: ClassVar[str] = ""
    feeds_back_output: ClassVar[bool] = False
    option_specs: ClassVar[Mapping[str, Option]] = {}
    tunable: ClassVar[Mapping[str, SearchRange]] = {}

    def __init__(self, *, input_size: int, output_size: int, hidden_size: int, **options: Any):
        super().__init__()
        owner = repr(self.topology or type(self).__name__)
        self.input_size = size(f"{owner} input_size", input_size)
        self.output_size = size(f"{owner} output_size", output_size)
        self.hidden_size = size(f"{owner} hidden_size", hidden_size)
        resolved = resolve_options(owner, self.option_specs, options)
        self.options: dict[str, Any] = {
            "input_size": self.input_size,
            "output_size": self.output_size,
            "hidden_size": self.hidden_size,
            **resolved,
        }

    # -- what a topology implements -------------------------------------------------------------

    def state_sizes(self) -> tuple[int, ...]:
        """The width n of each state tensor (B, n), in state order."""
        raise NotImplementedError

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        """Whole-sequence pass behind ``forward_unchecked``; valid is (B, T) bool or None."""
        raise NotImplementedError

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        """``step`` without its argument checks: x_t (B, I) -> y_t (B, O) and the next state.

        For callers that check once and then step many times (the streaming runner, the exported
        step graphs): ``x_t`` must have the parameters' dtype and ``state`` be a full tuple of
        (B, n) tensors, as ``step`` would have accepted them. Free of data-dependent control flow,
        so ``torch.export`` can trace it.
        """
        raise NotImplementedError

    def forward_unchecked(
        self,
        x: Tensor,
        state: State,
        valid: Tensor | None = None,
        targets: Tensor | None = None,
        teacher_forcing: float = 0.0,
    ) -> tuple[Tensor, State]:
        """``forward`` without its argument checks and without zeroing y past each length.

        x (B, T, I), a full state tuple, valid (B, T) bool or None (all valid) -> y (B, T, O) and
        each sequence's state after its last valid step. ``targets`` (B, T, O) and
        ``teacher_forcing`` in [0, 1] are read only by output feedback (the one topology that
        overrides this method); the others ignore them. Example: the exported teacher-forced
        graph calls ``model.forward_unchecked(x, state, None, targets, 1.0)``.
        """
        return self._sequence(x, state, valid)

    def _check_targets(self, targets: Tensor, batch: int, steps: int) -> Tensor:
        """Feedback topologies validate and normalise their targets here."""
        return targets

    # -- the public interface -------------------------------------------------------------------

    def init_state(self, batch_size: int) -> State:
        """The zero state for ``batch_size`` sequences: a tuple of (batch_size, n) tensors."""
        if not isinstance(batch_size, int) or isinstance(batch_size, bool) or batch_size < 1:
            raise ValueError(f"batch_size must be a positive integer, got {batch_size!r}")
        reference = self._reference_parameter()
        return tuple(
            torch.zeros(batch_size, n, dtype=reference.dtype, device=reference.device)
            for n in self.state_sizes()
        )

    def forward(
        self,
        x: Tensor,
        state: State | None = None,
        *,
        lengths: Tensor | Sequence[int] | None = None,
        targets: Tensor | None = None,
        teacher_forcing: float | None = None,
    ) -> tuple[Tensor, State]:
        """Run a batch of sequences: x (B, T, I) -> y (B, T, O) and the state after the last step.

        ``lengths`` (B,) ints in [0, T]: y is 0 past each length and the returned state is each
        sequence's state after its own last valid step. ``targets`` and ``teacher_forcing``
        (None = 1.0 with targets, else 0.0) drive output feedback; other topologies check
        ``teacher_forcing`` and ignore both.
        """
        x = self._check_input("x", x, ("B", "T", self.input_size))
        check_finite("x", x)
        batch, steps = x.shape[0], x.shape[1]
        if steps < 1:
            raise ValueError(f"x must have at least one time step, got shape {tuple(x.shape)}")
        valid = self._lengths_mask(lengths, batch, steps, x.device)
        forcing = self._check_teacher_forcing(teacher_forcing, targets)
        if self.feeds_back_output:
            if targets is not None:
                targets = self._check_targets(targets, batch, steps)
            elif forcing > 0.0:
                raise ValueError(
                    f"teacher_forcing={forcing} needs targets; pass targets= or teacher_forcing=0.0"
                )
        else:
            targets = None
        state = self._check_state(state, batch)
        y, state = self.forward_unchecked(x, state, valid, targets, forcing)
        if valid is not None:
            y = y.masked_fill(~valid.unsqueeze(-1), 0.0)
        return y, state

    def step(self, x_t: Tensor, state: State | None = None) -> tuple[Tensor, State]:
        """One streaming step: x_t (B, I) -> y_t (B, O) and the next state; equals ``forward``.

        Feedback topologies run free (they feed back their own output). Free of data-dependent
        control flow so it exports with a dynamic batch.
        """
        x_t = self._check_input("x_t", x_t, ("B", self.input_size))
        check_finite("x_t", x_t)
        state = self._check_state(state, x_t.shape[0])
        return self.step_unchecked(x_t, state)

    def extra_repr(self) -> str:
        return ", ".join(f"{k}={v!r}" for k, v in self.options.items())

    # -- shared checks --------------------------------------------------------------------------

    def _reference_parameter(self) -> Tensor:
        return next(self.parameters())

    def _check_input(self, name: str, value: Any, shape: tuple[int | str, ...]) -> Tensor:
        # Messages are built only on failure: step() runs these checks on every call.
        if not isinstance(value, Tensor):
            raise TypeError(f"{name} must be a torch.Tensor of shape {_shape(shape)}, got "
                            f"{type(value).__name__}")
        if value.dim() != len(shape):
            raise ValueError(
                f"{name} must have shape {_shape(shape)}, got shape {tuple(value.shape)}"
            )
        if value.shape[-1] != shape[-1]:
            raise ValueError(
                f"{name} has {value.shape[-1]} features in its last dimension but the model's "
                f"input_size is {self.input_size}; expected shape {_shape(shape)}"
            )
        self._check_dtype(name, value)
        return value

    def _check_dtype(self, name: str, value: Tensor, expected: torch.dtype | None = None) -> None:
        expected = self._reference_parameter().dtype if expected is None else expected
        if not value.is_floating_point():
            raise TypeError(f"{name} must be a floating-point tensor, got dtype {value.dtype}")
        if value.dtype != expected:
            raise TypeError(
                f"{name} has dtype {value.dtype} but the model's parameters are "
                f"{expected}; convert one of them (e.g. model.to({value.dtype}))"
            )

    def _lengths_mask(
        self, lengths: Any, batch: int, steps: int, device: torch.device
    ) -> Tensor | None:
        if lengths is None:
            return None
        try:
            lengths = torch.as_tensor(lengths, device=device)
        except (TypeError, ValueError, RuntimeError) as error:
            raise TypeError(f"lengths must be a (B,) integer tensor, got {lengths!r}") from error
        dtype = lengths.dtype
        if dtype.is_floating_point or dtype.is_complex or dtype == torch.bool:
            raise TypeError(f"lengths must hold integers, got dtype {lengths.dtype}")
        if tuple(lengths.shape) != (batch,):
            raise ValueError(
                f"lengths must have shape (B,) = ({batch},), got shape {tuple(lengths.shape)}"
            )
        low, high = int(lengths.min()), int(lengths.max())
        if low < 0 or high > steps:
            raise ValueError(
                f"lengths must lie in [0, T] = [0, {steps}], got values from {low} to {high}"
            )
        if low == steps:
            return None
        return torch.arange(steps, device=device).unsqueeze(0) < lengths.unsqueeze(1)

    @staticmethod
    def _check_teacher_forcing(value: Any, targets: Tensor | None) -> float:
        if value is None:
            return 1.0 if targets is not None else 0.0
        if not is_real(value) or not (0.0 <= value <= 1.0):
            raise ValueError(f"teacher_forcing must be a number in [0, 1] (or None), got {value!r}")
        return float(value)

    def _check_state(self, state: Any, batch: int) -> State:
        if state is None:
            return self.init_state(batch)
        sizes = self.state_sizes()
        if not isinstance(state, (tuple, list)) or len(state) != len(sizes):
            got = f"{len(state)} item(s)" if isinstance(state, (tuple, list)) else (
                type(state).__name__
            )
            expected = ", ".join(_shape((batch, n)) for n in sizes)
            raise ValueError(
                f"state for {self.topology!r} must be a tuple of {len(sizes)} tensor(s) shaped "
                f"{expected}, got {got}"
            )
        dtype = self._reference_parameter().dtype
        for index, (tensor, n) in enumerate(zip(state, sizes, strict=True)):
            name = f"state[{index}]"
            if not isinstance(tensor, Tensor):
                raise TypeError(f"{name} must be a torch.Tensor, got {type(tensor).__name__}")
            if tuple(tensor.shape) != (batch, n):
                raise ValueError(
                    f"{name} must have shape {_shape((batch, n))} (batch, {n}), got shape "
                    f"{tuple(tensor.shape)}"
                )
            self._check_dtype(name, tensor, dtype)
            check_finite(name, tensor)
        return tuple(state)
