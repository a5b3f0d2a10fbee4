"""Cost measurement: peak resident memory from the OS and per-step latency through model.step."""

import sys

import pytest
import torch

import loopzoo
from loopzoo.engine.costs import PeakMemory, step_latency_ms


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="VmHWM is Linux's")
def test_peak_memory_sees_an_allocation_made_and_freed_since_start():
    meter = PeakMemory()
    meter.start()
    assert meter.method.startswith("VmHWM")
    block = torch.ones(64 * 1024 * 1024 // 4)  # 64 MiB, written, so resident
    del block
    # The Linux high-water mark keeps the peak after the memory is returned (proc(5), VmHWM).
    assert meter.peak_mb() - meter.start_mb >= 60.0


def test_a_new_start_forgets_the_previous_peak():
    meter = PeakMemory()
    meter.start()
    block = torch.ones(64 * 1024 * 1024 // 4)
    del block
    first = meter.peak_mb()
    meter.start()
    assert meter.peak_mb() < first - 30.0


def test_latency_times_the_streaming_step(monkeypatch):
    model = loopzoo.create("gru", input_size=3, output_size=2, hidden_size=8)
    calls = []
    original = type(model).step

    def counting(self, x_t, state=None):
        calls.append(x_t.shape)
        return original(self, x_t, state)

    monkeypatch.setattr(type(model), "step", counting)
    latency = step_latency_ms(model, torch.randn(4, 10, 3), steps=6, repeats=3)
    assert latency > 0.0
    # One warm-up pass and three timed passes of six single steps, batch of 4.
    assert calls == [torch.Size([4, 3])] * (6 * 4)
    assert model.training
