"""Compiled time loops for the recurrent topologies, and when they run.

A topology's whole-sequence pass runs its time loop, forward and backward, in code compiled by
numba (the modules of this package) when all of these hold:

- numba can be imported (it is a dependency; where it cannot be, a warning says so once);
- the environment variable ``LOOPZOO_KERNELS`` is unset or ``numba`` (``torch`` forces the plain
  PyTorch path everywhere, the one every compiled loop is tested against);
- the tensors are float32 or float64 on the CPU;
- the call is not being traced for export or compiled by torch.compile (those see plain ops).

Otherwise the topology runs its plain PyTorch path, which computes the same function.
This module imports only torch: numba is imported the first time a compiled loop is asked for.
"""

from __future__ import annotations

import importlib
import os
import warnings
from collections.abc import Iterator
from contextlib import AbstractContextManager, contextmanager
from types import ModuleType

import numpy as np
import torch
from torch import Tensor

__all__ = [
    "ENVIRONMENT_VARIABLE",
    "applies",
    "blas_threads",
    "enabled",
    "forced",
    "kernel",
    "mask_array",
    "tracing",
]

ENVIRONMENT_VARIABLE = "LOOPZOO_KERNELS"
_CHOICES = ("numba", "torch")
_DTYPES = (torch.float32, torch.float64)

# None: not tried yet; True / False: numba and the kernels imported or not.
_importable: bool | None = None
_forced: list[bool] = []


def _choice() -> str:
    value = os.environ.get(ENVIRONMENT_VARIABLE, "numba").strip().lower() or "numba"
    if value not in _CHOICES:
        raise ValueError(
            f"environment variable {ENVIRONMENT_VARIABLE}={value!r} is not accepted; use "
            "'numba' (compiled time loops, the default) or 'torch' (plain PyTorch loops)"
        )
    return value


def _numba_importable() -> bool:
    global _importable
    if _importable is None:
        try:
            importlib.import_module(f"{__name__}._compile")
            _importable = True
        except ImportError as error:
            _importable = False
            warnings.warn(
                f"loopzoo: numba could not be imported ({error}); the recurrent topologies run "
                "their plain PyTorch time loops, which compute the same results more slowly",
                RuntimeWarning,
                stacklevel=3,
            )
    return _importable


def enabled() -> bool:
    """True when compiled time loops are switched on and numba imports."""
    if _forced:
        return _forced[-1] and _numba_importable()
    return _choice() == "numba" and _numba_importable()


def tracing() -> bool:
    """True while torch.export, torch.compile or torch.jit traces the call: graphs see plain ops."""
    return torch.compiler.is_compiling() or torch.compiler.is_exporting() or torch.jit.is_tracing()


def applies(*tensors: Tensor) -> bool:
    """True when a compiled loop may run on these tensors (see the module docstring)."""
    if tracing():
        return False
    if not all(t.device.type == "cpu" and t.dtype in _DTYPES for t in tensors):
        return False
    return enabled()


def mask_array(valid: Tensor | None) -> tuple[np.ndarray, bool]:
    """A (T, B, 1) or (T, B) bool mask as the loops take it: a (T, B) array and whether to read it
    (None: every step valid, a placeholder array that is never read)."""
    if valid is None:
        return np.ones((1, 1), dtype=np.bool_), False
    return valid.reshape(valid.shape[0], valid.shape[1]).contiguous().numpy(), True


def blas_threads() -> AbstractContextManager[None]:
    """Context: BLAS inside compiled loops uses torch's thread count."""
    return kernel("_compile").blas_threads()


def kernel(name: str) -> ModuleType:
    """The compiled-loop module ``loopzoo.topologies._kernels.<name>`` (imports numba)."""
    return importlib.import_module(f"{__name__}.{name}")


@contextmanager
def forced(compiled: bool) -> Iterator[None]:
    """Within the block, use compiled loops (True, where they apply) or the plain path (False),
    whatever ``LOOPZOO_KERNELS`` says: for tests and benchmarks that compare the two."""
    _forced.append(compiled)
    try:
        yield
    finally:
        _forced.pop()
