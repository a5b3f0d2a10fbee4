"""Teacher-forcing schedules for output-feedback training (scheduled sampling).

At training step ``i`` the true previous target is fed back with probability ``e_i``, one coin per
time step (Bengio, Vinyals, Jaitly & Shazeer, NIPS 2015). The three decays of that paper:

- linear:          e_i = max(e_min, k - c * i)
- exponential:     e_i = k ** i                  (0 < k < 1)
- inverse sigmoid: e_i = k / (k + exp(i / k))    (k >= 1)

Example::

    plan = TeacherForcingPlan.from_options(
        {"mode": "scheduled", "schedule": "inverse_sigmoid", "k": 50.0}, total_steps=600)
    plan.probability(0)    # 0.98...
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from loopzoo._registry import Registry, unknown_choice

__all__ = [
    "MODES",
    "SCHEDULES",
    "TeacherForcingPlan",
    "exponential",
    "inverse_sigmoid",
    "linear",
]

MODES = ("teacher_forcing", "free_running", "scheduled")

SCHEDULES: Registry[Callable[..., float]] = Registry("teacher-forcing schedule")

# exp(x) overflows a float beyond ~709.78; the probability is 0.0 to machine precision long before.
_EXP_LIMIT = 700.0


@SCHEDULES.register("linear")
def linear(step: int, *, k: float = 1.0, c: float, e_min: float = 0.0) -> float:
    """e_i = max(e_min, k - c * i)."""
    return max(e_min, k - c * step)


@SCHEDULES.register("exponential")
def exponential(step: int, *, k: float) -> float:
    """e_i = k ** i with 0 < k < 1."""
    return k**step


@SCHEDULES.register("inverse_sigmoid")
def inverse_sigmoid(step: int, *, k: float) -> float:
    """e_i = k / (k + exp(i / k)) with k >= 1."""
    ratio = step / k
    if ratio > _EXP_LIMIT:
        return 0.0
    return k / (k + math.exp(ratio))


def _number(options: Mapping[str, Any], key: str, accepted: str) -> float:
    value = options.get(key)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"model.feedback.{key} = {value!r} is invalid; accepted: {accepted}")
    return float(value)


@dataclass(frozen=True)
class TeacherForcingPlan:
    """How much teacher forcing an output-feedback model gets at each training step.

    ``mode`` is ``teacher_forcing`` (always 1.0), ``free_running`` (always 0.0) or ``scheduled``
    (``schedule`` with its ``params``).
    """

    mode: str
    schedule: str | None = None
    params: dict[str, float] = field(default_factory=dict)

    @classmethod
    def from_options(
        cls, options: Mapping[str, Any] | None, *, total_steps: int
    ) -> TeacherForcingPlan:
        """Validate ``model.feedback`` options; ``None`` means plain teacher forcing.

        The linear schedule's slope ``c`` defaults to reaching ``e_min`` at ``total_steps``.
        Raises ValueError naming the field, the value and what is accepted.
        """
        if options is None:
            return cls("teacher_forcing")
        options = dict(options)
        mode = options.pop("mode", None)
        if mode not in MODES:
            raise unknown_choice("model.feedback.mode", mode, list(MODES))
        # fed_back (target / distribution) is a model option recorded elsewhere, not a schedule key.
        options.pop("fed_back", None)
        if mode != "scheduled":
            extra = sorted(k for k, v in options.items() if v is not None and k != "schedule")
            if extra:
                raise ValueError(
                    f"model.feedback keys {extra} apply only to mode 'scheduled', got mode {mode!r}"
                )
            return cls(mode)
        schedule = options.pop("schedule", None)
        if schedule not in SCHEDULES.names():
            raise unknown_choice("model.feedback.schedule", schedule, SCHEDULES.names())
        params = _schedule_params(schedule, options, total_steps)
        return cls(mode, schedule, params)

    def probability(self, step: int) -> float:
        """Teacher-forcing probability e_i at training step ``step`` (0-based)."""
        if self.mode == "teacher_forcing":
            return 1.0
        if self.mode == "free_running":
            return 0.0
        return float(SCHEDULES.get(self.schedule)(step, **self.params))

    def describe(self) -> dict[str, Any]:
        """The plan as plain data for a run record."""
        return {"mode": self.mode, "schedule": self.schedule, **self.params}


def _schedule_params(
    schedule: str, options: dict[str, Any], total_steps: int
) -> dict[str, float]:
    options = {k: v for k, v in options.items() if v is not None}
    allowed = {"linear": {"k", "c", "e_min"}, "exponential": {"k"}, "inverse_sigmoid": {"k"}}
    unknown = sorted(set(options) - allowed[schedule])
    if unknown:
        raise ValueError(
            f"model.feedback keys {unknown} are not used by schedule {schedule!r}; "
            f"accepted: {sorted(allowed[schedule])}"
        )
    if schedule == "exponential":
        k = _number(options, "k", "a number with 0 < k < 1")
        if not 0.0 < k < 1.0:
            raise ValueError(f"model.feedback.k = {k!r} is invalid; accepted: 0 < k < 1")
        return {"k": k}
    if schedule == "inverse_sigmoid":
        k = _number(options, "k", "a number k >= 1")
        if k < 1.0:
            raise ValueError(f"model.feedback.k = {k!r} is invalid; accepted: k >= 1")
        return {"k": k}
    k = _number({"k": 1.0, **options}, "k", "a number in (0, 1]")
    e_min = _number({"e_min": 0.0, **options}, "e_min", "a number in [0, k]")
    if not 0.0 < k <= 1.0:
        raise ValueError(f"model.feedback.k = {k!r} is invalid; accepted: 0 < k <= 1")
    if not 0.0 <= e_min <= k:
        raise ValueError(f"model.feedback.e_min = {e_min!r} is invalid; accepted: 0 <= e_min <= k")
    if "c" in options:
        c = _number(options, "c", "a number c > 0")
        if c <= 0.0:
            raise ValueError(f"model.feedback.c = {c!r} is invalid; accepted: c > 0")
    else:
        c = (k - e_min) / max(total_steps, 1)
    return {"k": k, "c": c, "e_min": e_min}
