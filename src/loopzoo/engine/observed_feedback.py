"""What an output-feedback run may feed back: only targets a deployed model has observed by then.

A task states per target when it becomes observable (``task.observed_after()``). From that:

- the model's ``delay`` option: a target observed d steps later is fed back d steps later, so
  teacher forcing feeds the measured value a deployed model also has at that step (the
  series-parallel model of Narendra & Parthasarathy 1990) and free running feeds the model's own
  estimate of the same value (their parallel model);
- where a target is never observed (a sequence label, a sum of marked values) nothing is
  teacher-forced: the model trains and is scored free running only, and no "measured feedback"
  score exists, since a deployed model would never have those values.

Example::

    options = {**model_options, "delay": delay_option(task, model_options)}
    plan, note = observed_plan(plan, task)
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from loopzoo.engine.errors import ConfigError
from loopzoo.engine.schedules import TeacherForcingPlan

__all__ = [
    "FREE_RUNNING",
    "MEASURED",
    "delay_option",
    "measured_feedback_exists",
    "observed_plan",
    "selected_group",
]

FREE_RUNNING = "free_running"
MEASURED = "measured_feedback"


def measured_feedback_exists(task: Any) -> bool:
    """Whether every target is observed at some later step, so a series-parallel run (measured
    values fed back) is something a deployed model can do."""
    return all(delay is not None for delay in task.observed_after())


def delay_option(task: Any, model_options: Mapping[str, Any]) -> int | list[int]:
    """The ``delay`` an output-feedback model gets on ``task``: each target's observation delay
    (1 where a target is never observed: it then only ever feeds back its own output).

    A configured ``model.options.delay`` is kept if no channel is fed back before it is
    observed, and refused otherwise (teacher forcing would feed a value from the future).
    """
    needed = [1 if delay is None else delay for delay in task.observed_after()]
    given = model_options.get("delay")
    if given is None:
        return needed[0] if len(set(needed)) == 1 else needed
    given_list = list(given) if isinstance(given, (list, tuple)) else [given] * len(needed)
    if len(given_list) != len(needed) or any(
        not isinstance(g, int) or isinstance(g, bool) or g < n
        for g, n in zip(given_list, needed, strict=False)
    ):
        raise ConfigError(
            f"model.options.delay = {given!r} feeds back targets of task {task.name!r} before "
            f"they are observed; accepted: per target at least {needed} "
            f"(task observability: {task.observability()}), or leave it unset"
        )
    return given


def observed_plan(plan: TeacherForcingPlan, task: Any) -> tuple[TeacherForcingPlan, str | None]:
    """The teacher-forcing plan actually used, and a note when it differs from the configured
    one: on a task whose targets are never observed, only free running (no leaked labels)."""
    if plan.mode == "free_running" or measured_feedback_exists(task):
        return plan, None
    note = (f"configured {plan.mode!r} is not used: task {task.name!r} has targets a deployed "
            "model never observes, so nothing is teacher-forced (trained free running)")
    return TeacherForcingPlan("free_running"), note


def selected_group(configured: str, task: Any) -> str:
    """The metric group that selects the rate and stops training (``protocol.feedback_select``);
    measured feedback falls back to free running where it does not exist."""
    if configured == MEASURED and not measured_feedback_exists(task):
        return FREE_RUNNING
    return configured
