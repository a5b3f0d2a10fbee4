"""End to end: a small torch.nn.GRU (the reference gated layer) trained on a task's training split
beats the task's classical baseline on the test split, so targets really follow from inputs.

Training-heavy, hence slow. Thresholds are common practice, not published figures.
"""

import pytest
import torch

import loopzoo

pytestmark = pytest.mark.slow


class Probe(torch.nn.Module):
    def __init__(self, inputs, outputs):
        super().__init__()
        self.gru = torch.nn.GRU(inputs, 32, batch_first=True)
        self.readout = torch.nn.Linear(32, outputs)

    def forward(self, x):
        return self.readout(self.gru(x)[0])


def train(task, steps=400):
    torch.manual_seed(0)
    model = Probe(task.input_size, task.output_size)
    optimiser = torch.optim.Adam(model.parameters(), lr=1e-2)
    train_split = task.split("train")
    generator = torch.Generator().manual_seed(0)
    for _ in range(steps):
        rows = torch.randint(len(train_split), (64,), generator=generator)
        x, y, mask = train_split.x[rows], train_split.y[rows], train_split.mask[rows]
        out = model(x)
        if task.kind == "regression":
            loss = (out - y)[mask].pow(2).mean()
        else:
            loss = torch.nn.functional.cross_entropy(out[mask], y[mask])
        optimiser.zero_grad()
        loss.backward()
        torch.nn.utils.clip_grad_norm_(model.parameters(), 1.0)
        optimiser.step()
    with torch.no_grad():
        return task.score(model(task.split("test").x), "test")


@pytest.mark.parametrize("name, options, baseline, factor", [
    ("adding", {"length": 20}, "memoryless", 0.5),
    ("reber", {}, "bigram", 0.8),
    ("sines", {"horizons": [1, 5]}, "persistence", 0.5),
    ("elnino", {}, "persistence", 0.8),
])
def test_gru_beats_the_baseline(name, options, baseline, factor):
    task = loopzoo.tasks.create(name, seed=0, **options)
    scores = train(task)
    reference = task.baselines()[baseline].metrics[task.metric]
    assert scores[task.metric] < factor * reference, (scores, reference)
