"""torch's traceable time loop, which torch publishes only as a private prototype.

``scan`` stands in for a public loop operator that ``torch.export`` can trace with a symbolic
length (torch 2.13 has none): it is ``torch._higher_order_ops.scan``. The signature used is
``scan(combine_fn, init, xs, dim=...) -> (final_carry, stacked_outputs)`` with
``combine_fn(carry, x_t) -> (next_carry, y_t)``. ``tests/core/test_torch_scan.py`` checks it
against a Python loop and under ``torch.export`` with a dynamic length, so an upgrade that moves
or changes it fails there, by name.
"""

from __future__ import annotations

from torch._higher_order_ops import scan

__all__ = ["scan"]
