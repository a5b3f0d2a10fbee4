"""The compiled time loops (numba) against the plain PyTorch path, forward and gradients.

Sources of truth: each topology's plain PyTorch path, itself checked against torch.nn's recurrent
layers and torch.autograd.gradcheck in this folder (test_reference_torch_rnn.py,
test_gradcheck.py, which run on the compiled path by default); NumPy's float64 tanh and SciPy's
float64 logistic function (scipy.special.expit) for the float32 tanh and sigmoid the loops use.
`make test-plain` runs this folder and tests/production with LOOPZOO_KERNELS=torch, the
fallback path.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest
import torch
from torch.func import functional_call

import loopzoo
from loopzoo.topologies import _kernels

B, T = 3, 6


def _run(model, x, state, params, kwargs, compiled: bool):
    names = [n for n, _ in model.named_parameters()]
    with _kernels.forced(compiled):
        torch.manual_seed(5)  # scheduled sampling draws its coins: the same on both paths
        y, final = functional_call(model, dict(zip(names, params, strict=True)), (x, state), kwargs)
    weights = torch.randn_like(y, generator=torch.Generator().manual_seed(9))
    loss = (y * weights).sum() + sum((s * s).sum() for s in final)
    grads = torch.autograd.grad(loss, [x, *state, *params], allow_unused=True)
    return [y.detach(), *(s.detach() for s in final), *grads]


def _compare(name: str, options: dict, dtype: torch.dtype, tolerance: dict) -> None:
    with _kernels.forced(True):  # whatever LOOPZOO_KERNELS says (`make test-plain` sets torch)
        assert _kernels.enabled(), "numba is a dependency: the compiled loops must be available"
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=5, **options)
    model = model.to(dtype).eval()
    x = torch.randn(B, T, 3, dtype=dtype, requires_grad=True)
    state = tuple(s.normal_().requires_grad_() for s in model.init_state(B))
    params = [p.detach().clone().requires_grad_() for p in model.parameters()]
    variants = [{}, {"lengths": torch.tensor([T, 2, 0])}]
    if model.feeds_back_output:
        targets = torch.randn(B, T, 2, dtype=dtype).softmax(-1)
        variants += [{"targets": targets, "teacher_forcing": f} for f in (1.0, 0.5, 0.0)]
        variants.append({"targets": targets, "teacher_forcing": 0.5, "lengths": [T, 4, 1]})
    for kwargs in variants:
        compiled = _run(model, x, state, params, kwargs, True)
        plain = _run(model, x, state, params, kwargs, False)
        for index, (c, p) in enumerate(zip(compiled, plain, strict=True)):
            if c is None or p is None:
                assert c is None and p is None, f"gradient {index} is missing on one path only"
                continue
            torch.testing.assert_close(c, p, **tolerance, msg=lambda m, i=index: f"{i}: {m}")


def test_compiled_equals_plain_in_float64(topology_case: tuple[str, dict]) -> None:
    """Outputs, final states and every gradient agree to rounding (exact tanh in float64)."""
    name, options = topology_case
    _compare(name, options, torch.float64, {"atol": 1e-10, "rtol": 1e-8})


def test_compiled_equals_plain_in_float32(topology_case: tuple[str, dict]) -> None:
    """float32 loops use a rational tanh (below): agreement to float32 rounding."""
    name, options = topology_case
    _compare(name, options, torch.float32, {"atol": 2e-5, "rtol": 1e-4})


def test_float32_tanh_and_sigmoid_match_numpy() -> None:
    """Largest error of the loops' float32 tanh / sigmoid against float64 references, over
    [-12, 12] and at the extremes (a float32 unit in the last place near 1 is 6e-8); NaN stays
    NaN."""
    from numba import njit
    from scipy.special import expit

    from loopzoo.topologies._kernels._compile import sigmoid, tanh

    @njit
    def apply(values, out_tanh, out_sigmoid):
        for i in range(values.size):
            out_tanh[i] = tanh(values[i])
            out_sigmoid[i] = sigmoid(values[i])

    grid = np.concatenate([np.linspace(-12, 12, 400_001), [-1e30, 1e30, 0.0]]).astype(np.float32)
    got_tanh, got_sigmoid = np.empty_like(grid), np.empty_like(grid)
    apply(grid, got_tanh, got_sigmoid)
    exact = grid.astype(np.float64)
    assert np.abs(got_tanh - np.tanh(exact)).max() < 4e-7
    assert np.abs(got_sigmoid - expit(exact)).max() < 3e-7
    nan = np.array([np.nan], dtype=np.float32)
    out_tanh, out_sigmoid = np.empty_like(nan), np.empty_like(nan)
    apply(nan, out_tanh, out_sigmoid)
    assert np.isnan(out_tanh[0]) and np.isnan(out_sigmoid[0])


def test_environment_switch(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(_kernels.ENVIRONMENT_VARIABLE, "torch")
    assert not _kernels.enabled()
    monkeypatch.setenv(_kernels.ENVIRONMENT_VARIABLE, "numba")
    assert _kernels.enabled()
    monkeypatch.setenv(_kernels.ENVIRONMENT_VARIABLE, "fortran")
    with pytest.raises(ValueError, match="LOOPZOO_KERNELS='fortran'.*'numba'.*'torch'"):
        _kernels.enabled()


def test_without_numba_the_plain_path_runs_and_warns_once() -> None:
    """numba made unimportable in a fresh interpreter: one warning, the same numbers."""
    code = (
        "import sys, warnings\n"
        "sys.modules['numba'] = None\n"
        "import torch, loopzoo\n"
        "torch.manual_seed(0)\n"
        "model = loopzoo.create('stacked', input_size=3, output_size=2, hidden_size=5).double()\n"
        "x = torch.randn(2, 7, 3, dtype=torch.float64)\n"
        "with warnings.catch_warnings(record=True) as caught:\n"
        "    warnings.simplefilter('always')\n"
        "    y, _ = model(x)\n"
        "    model(x)\n"
        "notes = [str(w.message) for w in caught if 'numba' in str(w.message)]\n"
        "print(len(notes), 'plain PyTorch time loops' in notes[0])\n"
        "torch.save(y, sys.argv[1])\n"
    )
    path = os.path.join(os.environ.get("TMPDIR", "/tmp"), f"loopzoo-plain-{os.getpid()}.pt")
    environment = {k: v for k, v in os.environ.items() if k != _kernels.ENVIRONMENT_VARIABLE}
    result = subprocess.run([sys.executable, "-c", code, path], capture_output=True, text=True,
                            timeout=300, check=True, env=environment)
    assert result.stdout.split("\n")[0] == "1 True"
    plain = torch.load(path)
    os.remove(path)
    torch.manual_seed(0)
    model = loopzoo.create("stacked", input_size=3, output_size=2, hidden_size=5).double()
    x = torch.randn(2, 7, 3, dtype=torch.float64)
    with _kernels.forced(True):
        y, _ = model(x)
    torch.testing.assert_close(y, plain, atol=1e-12, rtol=1e-10)


@pytest.mark.parametrize("nonlinearity", ["tanh", "relu"])
@pytest.mark.parametrize("compiled", [True, False])
@pytest.mark.parametrize("kept", [True, False])
def test_teacher_forced_layer_equals_its_autograd_formula(nonlinearity: str, compiled: bool,
                                                          kept: bool):
    """The row-blocked teacher-forced pass (several blocks here), with h kept in a workspace or
    recomputed, against y = V f(X W^T + b) + c through torch autograd, float64: output and
    every gradient."""
    from loopzoo.topologies._teacher_forced import Workspace, teacher_forced_layer

    torch.manual_seed(4)
    rows, features, hidden, outputs = 20_000, 5, 4, 3  # blocks of 8192 rows at this width
    args = [torch.randn(rows, features), torch.randn(hidden, features), torch.randn(hidden),
            torch.randn(outputs, hidden), torch.randn(outputs)]
    args = [a.double().requires_grad_() for a in args]
    inputs, weight, bias, readout_w, readout_b = args
    act = torch.relu if nonlinearity == "relu" else torch.tanh
    want = act(inputs @ weight.t() + bias) @ readout_w.t() + readout_b
    with _kernels.forced(compiled):
        got = teacher_forced_layer(*args, nonlinearity=nonlinearity,
                                   workspace=Workspace() if kept else None)
    upstream = torch.randn_like(want)
    for g, w in zip(torch.autograd.grad(got, args, upstream),
                    torch.autograd.grad(want, args, upstream), strict=True):
        torch.testing.assert_close(g, w, atol=1e-10, rtol=1e-8)
    torch.testing.assert_close(got, want, atol=1e-10, rtol=1e-8)


def test_a_pass_whose_workspace_was_reused_recomputes_its_activations():
    """Two forward passes through one workspace, then the first pass's backward: its kept h was
    overwritten by the second pass, so it recomputes h; gradients equal autograd's (float64)."""
    import copy
    import pickle

    from loopzoo.topologies._teacher_forced import Workspace, teacher_forced_layer

    torch.manual_seed(5)
    weights = [t.double().requires_grad_() for t in (torch.randn(4, 5), torch.randn(4),
                                                      torch.randn(3, 4), torch.randn(3))]
    first, second = torch.randn(300, 5).double(), torch.randn(300, 5).double()
    workspace = Workspace()
    got = teacher_forced_layer(first, *weights, nonlinearity="tanh", workspace=workspace)
    teacher_forced_layer(second, *weights, nonlinearity="tanh", workspace=workspace)
    weight, bias, readout_w, readout_b = weights
    want = torch.tanh(first @ weight.t() + bias) @ readout_w.t() + readout_b
    upstream = torch.randn_like(want)
    for g, w in zip(torch.autograd.grad(got, weights, upstream),
                    torch.autograd.grad(want, weights, upstream), strict=True):
        torch.testing.assert_close(g, w, atol=1e-10, rtol=1e-8)
    # A copied or pickled model does not carry the buffer along.
    for clone in (copy.deepcopy(workspace), pickle.loads(pickle.dumps(workspace))):
        assert clone._buffer is None and clone.generation == 0


def test_compiled_equals_plain_with_a_delay_per_output_channel() -> None:
    """Output feedback with a different delay per channel reads its state line per channel."""
    _compare("output-feedback", {"delay": [1, 3]}, torch.float64, {"atol": 1e-10, "rtol": 1e-8})
