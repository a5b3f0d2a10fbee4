"""Optimisers by name, with their accepted extra settings checked before training."""

from __future__ import annotations

import functools
from collections.abc import Callable, Mapping
from typing import Any

import torch

from loopzoo._registry import Registry

__all__ = ["OPTIMIZERS", "optimizer_factory"]

# name -> (torch class, the extra keyword arguments of ``optim:`` it accepts)
OPTIMIZERS: Registry[tuple[type[torch.optim.Optimizer], frozenset[str]]] = Registry("optimizer")
OPTIMIZERS.register("adam")((torch.optim.Adam, frozenset({"betas", "eps"})))
OPTIMIZERS.register("adamw")((torch.optim.AdamW, frozenset({"betas", "eps"})))
OPTIMIZERS.register("sgd")((torch.optim.SGD, frozenset({"momentum", "nesterov"})))
OPTIMIZERS.register("rmsprop")((torch.optim.RMSprop, frozenset({"alpha", "eps", "momentum"})))
# torch has one-kernel ("fused") CPU updates for these: at the small models of the built-in
# suites the one-update-per-tensor default cost up to a quarter of a training step
# (benchmarks/RESULTS.md, "Optimiser step").
_FUSED = frozenset({"adam", "adamw", "sgd"})


def optimizer_factory(
    name: str, *, lr: float, weight_decay: float, extra: Mapping[str, Any]
) -> Callable[..., torch.optim.Optimizer]:
    """A picklable ``params -> optimizer`` for ``name`` (``adam``, ``adamw``, ``sgd``, ``rmsprop``).

    Raises ValueError for an unknown name or an extra setting the optimiser does not take.

    Example::

        make = optimizer_factory("sgd", lr=0.1, weight_decay=0.0, extra={"momentum": 0.9})
        optimizer = make(model.parameters())
    """
    cls, accepted = OPTIMIZERS.get(name)
    unknown = sorted(set(extra) - accepted)
    if unknown:
        raise ValueError(
            f"optim keys {unknown} are not settings of optimizer {name!r}; "
            f"accepted: name, lr, weight_decay, grad_clip_norm, {', '.join(sorted(accepted))}"
        )
    settings = dict(extra)
    if "betas" in settings:
        settings["betas"] = tuple(settings["betas"])
    if name in _FUSED:
        settings["fused"] = True
    return functools.partial(cls, lr=lr, weight_decay=weight_decay, **settings)
