"""The topology benchmark script runs end to end at toy sizes (a smoke test; it times nothing)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import loopzoo

SCRIPT = Path(__file__).resolve().parents[2] / "benchmarks" / "bench_topologies.py"


def test_benchmark_tables_cover_every_topology() -> None:
    spec = importlib.util.spec_from_file_location("bench_topologies", SCRIPT)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    table = bench.speed_table(batch=2, steps=3, inputs=2, hidden=3, outputs=2, rounds=1,
                              plain=True)
    for name in loopzoo.available():
        assert f"| {name}" in table
    assert "| hidden-feedback (plain loops) |" in table
    assert "| torch.nn.LSTM(2 layers) |" in table and "| torch.nn.RNN(1 layer) |" in table
    budgets = bench.budget_table(batch=2, steps=4, inputs=2, outputs=2, budgets=[200, 400],
                                 rounds=1)
    assert budgets.count("\n") == 5  # title, blank, header, rule, one row per budget
