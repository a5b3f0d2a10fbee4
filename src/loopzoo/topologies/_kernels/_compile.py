"""What every compiled loop shares: the numba options, tanh / sigmoid, and the BLAS thread count.

Loops are compiled once per dtype (float32, float64) and cached on disk (numba's ``cache=True``:
``__pycache__`` beside the source, or numba's user cache folder where that is read-only). numba's
cache tracks only the file of the cached function itself: after editing this file, delete the
``*.nbi`` / ``*.nbc`` files under ``_kernels/__pycache__``.

Matrix products inside the loops are ``np.dot``, which numba hands to SciPy's BLAS; its thread
count follows torch's (``blas_threads``), so a job given one torch thread uses one core.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from functools import partial

import numba
import numpy as np
import scipy.linalg.cython_blas  # noqa: F401  (the BLAS numba's np.dot calls; loaded before counting)
import torch
from numba import types
from numba.extending import overload
from threadpoolctl import ThreadpoolController

__all__ = ["blas_threads", "jit", "scalar", "sigmoid", "tanh"]

# No 'nnan' / 'ninf': a NaN or inf must travel through a loop as it does through torch, so a
# diverging run is seen as diverged. 'contract' allows fused multiply-adds; error_model='numpy'
# drops Python's division-by-zero check, which kept divisions from being vectorised.
jit = partial(
    numba.njit,
    fastmath={"contract", "arcp", "nsz", "afn"},
    error_model="numpy",
    cache=True,
    nogil=True,
)

_TANH_LIMIT = 7.90531110763549805
# tanh(x) = x P(x^2) / Q(x^2) on [-7.905, 7.905] (float32 is +-1 beyond): the rational
# approximation Eigen's fast float tanh uses. Largest error against float64 tanh measured on
# 2M points in [-12, 12]: 2.6e-7 (about two float32 units in the last place); see
# tests/topologies/test_compiled_loops.py.
_P = (
    -2.76076847742355e-16,
    2.00018790482477e-13,
    -8.60467152213735e-11,
    5.12229709037114e-08,
    1.48572235717979e-05,
    6.37261928875436e-04,
    4.89352455891786e-03,
)
_Q = (1.19825839466702e-06, 1.18534705686654e-04, 2.26843463243900e-03, 4.89352518554385e-03)


def tanh(x):  # pragma: no cover - replaced by its numba overload inside compiled code
    """tanh inside compiled loops: a vectorisable rational form for float32, exact for float64."""
    raise NotImplementedError("tanh is for compiled code")


def sigmoid(x):  # pragma: no cover - replaced by its numba overload inside compiled code
    """The logistic function inside compiled loops: 0.5 + 0.5 tanh(x / 2)."""
    raise NotImplementedError("sigmoid is for compiled code")


def scalar(value, array):  # pragma: no cover - replaced by its numba overload
    """``value`` as a scalar of ``array``'s dtype inside compiled code: a Python number would
    promote float32 arithmetic to float64 (NumPy's rules), halving the vector width."""
    raise NotImplementedError("scalar is for compiled code")


@overload(scalar, inline="always")
def _scalar(value, array):
    dtype = array.dtype
    return lambda value, array: dtype(value)


@overload(tanh, inline="always")
def _tanh(x):
    if isinstance(x, types.Float) and x.bitwidth == 32:
        p0, p1, p2, p3, p4, p5, p6 = (np.float32(c) for c in _P)
        q0, q1, q2, q3 = (np.float32(c) for c in _Q)
        limit = np.float32(_TANH_LIMIT)

        def tanh_float32(x):
            # NumPy's maximum / minimum keep a NaN a NaN; a conditional expression here would
            # trip numba's SSA check once inlined.
            c = np.minimum(np.maximum(x, -limit), limit)
            c2 = c * c
            p = ((((((p0 * c2 + p1) * c2 + p2) * c2 + p3) * c2 + p4) * c2 + p5) * c2 + p6) * c
            q = ((q0 * c2 + q1) * c2 + q2) * c2 + q3
            return p / q

        return tanh_float32
    return lambda x: np.tanh(x)


@overload(sigmoid, inline="always")
def _sigmoid(x):
    if isinstance(x, types.Float) and x.bitwidth == 32:
        half = np.float32(0.5)
        return lambda x: half + half * tanh(half * x)
    return lambda x: 1.0 / (1.0 + np.exp(-x))


_blas = ThreadpoolController().select(user_api="blas")


@contextmanager
def blas_threads() -> Iterator[None]:
    """Within the block, BLAS uses as many threads as torch (``torch.get_num_threads()``)."""
    wanted = torch.get_num_threads()
    before = [c.num_threads for c in _blas.lib_controllers]
    changed = [c for c, n in zip(_blas.lib_controllers, before, strict=True) if n != wanted]
    for controller in changed:
        controller.set_num_threads(wanted)
    try:
        yield
    finally:
        for controller, n in zip(_blas.lib_controllers, before, strict=True):
            if controller in changed:
                controller.set_num_threads(n)
