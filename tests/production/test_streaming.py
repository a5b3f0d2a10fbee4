"""StreamRunner: the same numbers as ``forward``, state save / restore, and clear errors."""

from __future__ import annotations

import pytest
import torch
from safetensors.torch import save as safetensors_save

import loopzoo
from loopzoo.serve.streaming import StreamRunner

# Batched and single-stream matrix products round differently in the last float32 bits, and
# states that accumulate (residual-skip) grow past 1, hence a relative part too.
ATOL, RTOL = 1e-6, 1e-6


def _sequences(model, streams=4, steps=11, seed=3):
    generator = torch.Generator().manual_seed(seed)
    return torch.randn(streams, steps, model.input_size, generator=generator)


def test_runner_equals_forward_one_stream_at_a_time_and_batched(topology, build):
    model = build(topology)
    x = _sequences(model)
    with torch.no_grad():
        y_ref, state_ref = model(x)
    single, batched = StreamRunner(model), StreamRunner(model)
    for stream in range(x.shape[0]):
        single.start(stream)
        batched.start(f"sensor-{stream}")
    outputs_single, outputs_batched = [], []
    for t in range(x.shape[1]):
        outputs_single.append(torch.stack([single.push(s, x[s, t]) for s in range(x.shape[0])]))
        pushed = batched.push_many({f"sensor-{s}": x[s, t] for s in range(x.shape[0])})
        outputs_batched.append(torch.stack([pushed[f"sensor-{s}"] for s in range(x.shape[0])]))
    torch.testing.assert_close(torch.stack(outputs_single, 1), y_ref, atol=ATOL, rtol=RTOL)
    torch.testing.assert_close(torch.stack(outputs_batched, 1), y_ref, atol=ATOL, rtol=RTOL)
    for s in range(x.shape[0]):
        for mine, reference in zip(single.state(s), state_ref, strict=True):
            torch.testing.assert_close(mine[0], reference[s], atol=ATOL, rtol=RTOL)


def test_state_saved_mid_stream_resumes_in_a_new_runner(topology, build):
    model = build(topology)
    x = _sequences(model, streams=2, steps=10)
    with torch.no_grad():
        y_ref, _ = model(x)
    first = StreamRunner(model)
    first.start("a")
    first.start("b")
    head = [first.push_many({"a": x[0, t], "b": x[1, t]}) for t in range(6)]
    saved = {name: first.save_state(name) for name in ("a", "b")}
    assert all(isinstance(data, bytes) for data in saved.values())
    second = StreamRunner(model)
    for name, data in saved.items():
        second.restore_state(name, data)
    tail = [second.push_many({"a": x[0, t], "b": x[1, t]}) for t in range(6, 10)]
    got = torch.stack([torch.stack([step["a"], step["b"]]) for step in head + tail], 1)
    torch.testing.assert_close(got, y_ref, atol=ATOL, rtol=RTOL)


def test_reset_and_stop(build):
    model = build("hidden-feedback")
    x = _sequences(model, streams=1, steps=3)[0]
    runner = StreamRunner(model)
    runner.start("pump")
    first = [runner.push("pump", sample) for sample in x]
    runner.reset("pump")
    again = [runner.push("pump", sample) for sample in x]
    assert all(torch.equal(a, b) for a, b in zip(first, again, strict=True))
    runner.stop("pump")
    assert runner.active == []


def test_samples_may_be_lists_or_numpy(build):
    model = build("gru")
    runner = StreamRunner(model)
    runner.start(0)
    runner.start(1)
    from_list = runner.push(0, [0.5, -1.0, 2.0])
    from_array = runner.push(1, torch.tensor([0.5, -1.0, 2.0]).numpy())
    assert torch.equal(from_list, from_array) and from_list.shape == (model.output_size,)


def test_bad_input_is_a_clear_error(build):
    model = build("hidden-feedback")
    runner = StreamRunner(model)
    runner.start("pump-1")
    with pytest.raises(ValueError, match=r"unknown stream 'pump-2'; available: pump-1"):
        runner.push("pump-2", [0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match="already started"):
        runner.start("pump-1")
    with pytest.raises(ValueError, match=r"shape \(2,\); expected \(3,\)"):
        runner.push("pump-1", [0.0, 0.0])
    with pytest.raises(ValueError, match=r"shape \(1, 3\); expected \(3,\)"):
        runner.push("pump-1", [[0.0, 0.0, 0.0]])
    with pytest.raises(ValueError, match="sample for stream 'pump-1' contains NaN"):
        runner.push("pump-1", [0.0, float("nan"), 0.0])
    # issue 15: a string sample names the stream instead of a bare torch TypeError
    with pytest.raises(TypeError, match=r"sample for stream 'pump-1' must be 3 numbers .*'abc'"):
        runner.push("pump-1", "abc")
    with pytest.raises(TypeError, match=r"samples\['pump-1'\] must be 3 numbers"):
        runner.push_many({"pump-1": "abc"})
    runner.start("pump-3")
    with pytest.raises(ValueError, match=r"samples\['pump-3'\] contains NaN"):
        runner.push_many({"pump-1": [0.0, 0.0, 0.0], "pump-3": [float("inf"), 0.0, 0.0]})
    with pytest.raises(ValueError, match=r"samples\['pump-3'\] has shape \(2,\)"):
        runner.push_many({"pump-1": [0.0, 0.0, 0.0], "pump-3": [0.0, 0.0]})
    with pytest.raises(ValueError, match=r"samples\['pump-1'\] has shape \(1, 3\)"):
        runner.push_many({"pump-1": [[0.0, 0.0, 0.0]], "pump-3": [[0.0, 0.0, 0.0]]})
    with pytest.raises(TypeError, match="loopzoo module"):
        StreamRunner(torch.nn.Linear(3, 2))


def test_finiteness_of_a_sample_is_exact_on_both_ways_of_summing():
    # A sample is first summed (a Python sum up to 64 values, numpy beyond); only a sum that is
    # not finite is tested value by value, so an overflowing sum of finite values is accepted.
    wide = loopzoo.create("hidden-feedback", input_size=100, output_size=2, hidden_size=4)
    narrow = loopzoo.create("hidden-feedback", input_size=3, output_size=2,
                            hidden_size=4).double()
    for model, large in ((wide, 3e38), (narrow, 1e308)):
        runner = StreamRunner(model)
        runner.start("s")
        sample = torch.zeros(model.input_size, dtype=next(model.parameters()).dtype)
        sample[:2] = large
        assert runner.push("s", sample).shape == (2,)
        sample[1] = float("nan")
        with pytest.raises(ValueError, match="sample for stream 's' contains NaN"):
            runner.push("s", sample)


def test_bad_state_data_is_a_clear_error(build):
    model = build("lstm")
    runner = StreamRunner(model)
    runner.start("s")
    good = runner.save_state("s")
    with pytest.raises(ValueError, match="not valid"):
        runner.restore_state("s", b"\x01\x02")
    with pytest.raises(ValueError, match="not valid"):
        runner.restore_state("s", good[: len(good) // 2])
    with pytest.raises(TypeError, match="must be bytes"):
        runner.restore_state("s", "text")
    other = StreamRunner(build("gru"))
    other.start("s")
    with pytest.raises(ValueError, match="was saved by"):
        runner.restore_state("s", other.save_state("s"))
    metadata = runner._state_metadata()
    hidden = model.hidden_size
    wrong_shape = safetensors_save(
        {"state_0": torch.zeros(1, hidden + 1), "state_1": torch.zeros(1, hidden)}, metadata
    )
    with pytest.raises(ValueError, match="state_0 is"):
        runner.restore_state("s", wrong_shape)
    missing = safetensors_save({"state_0": torch.zeros(1, hidden)}, metadata)
    with pytest.raises(ValueError, match="holds"):
        runner.restore_state("s", missing)
    not_finite = safetensors_save(
        {"state_0": torch.full((1, hidden), float("nan")), "state_1": torch.zeros(1, hidden)},
        metadata,
    )
    with pytest.raises(ValueError, match="NaN"):
        runner.restore_state("s", not_finite)


def test_a_float64_model_streams_in_float64(build):
    model = build("hidden-feedback").double()
    x = _sequences(model, streams=1, steps=4).double()
    runner = StreamRunner(model)
    runner.start(0)
    got = torch.stack([runner.push(0, x[0, t].tolist()) for t in range(4)])
    assert got.dtype == torch.float64
    with torch.no_grad():
        torch.testing.assert_close(got, model(x)[0][0], atol=1e-12, rtol=0)
