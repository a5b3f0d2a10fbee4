"""The smallest job that goes through the whole harness: a few short adding sequences, two steps."""

from __future__ import annotations

TINY = ("task=adding", "task.options.length=5", "task.options.train_size=16",
        "task.options.val_size=8", "task.options.test_size=8", "task.batch_size=8",
        "task.budget=300", "trainer.max_steps=2", "protocol.val_every=1", "protocol.trials=null")


def tiny(*changes: str) -> list[str]:
    """``TINY`` followed by ``changes`` (Hydra applies overrides in order: a later one wins)."""
    return [*TINY, *changes]
