"""torch's private scan behind ``loopzoo._torch_scan`` still loops and exports as loopzoo relies
on; a torch upgrade that moves or changes it fails here, by name."""

import torch
from torch.export import Dim

from loopzoo._torch_scan import scan


def _running_sum(carry, x_t):
    total = carry + x_t
    return total, total.clone()


def test_scan_equals_a_python_loop_along_dim_1():
    x = torch.randn(2, 5, 3)
    final, ys = scan(_running_sum, torch.zeros(2, 3), x, dim=1)
    assert ys.shape == x.shape  # outputs stacked along the scanned dimension
    assert torch.allclose(ys, torch.cumsum(x, dim=1))
    assert torch.allclose(final, x.sum(dim=1))


class _Loop(torch.nn.Module):
    def forward(self, x):
        final, ys = scan(_running_sum, torch.zeros_like(x[:, 0]), x, dim=1)
        return final, ys


def test_scan_exports_with_a_symbolic_length():
    program = torch.export.export(_Loop(), (torch.randn(2, 3, 4),),
                                  dynamic_shapes=({1: Dim("time", min=2, max=64)},))
    x = torch.randn(2, 9, 4)
    final, _ = program.module()(x)
    assert torch.allclose(final, x.sum(dim=1), atol=1e-6)
