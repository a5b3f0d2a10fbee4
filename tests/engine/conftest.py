"""The shipped config shrunk to a run of well under a second, shared by the engine's tests."""

import pytest
from hydra import compose, initialize_config_module

import loopzoo.harness.config  # noqa: F401 - registers the loopzoo.* resolvers the configs use

TINY = (
    "task.options.length=12", "task.options.train_size=128", "task.options.val_size=32",
    "task.options.test_size=32", "task.batch_size=32", "task.budget=400",
    "trainer.max_steps=20", "protocol.val_every=10", "protocol.trials=null",
    "trainer.enable_progress_bar=false",
)


@pytest.fixture
def tiny_config(request):
    """``tiny_config(*overrides)``: the shipped config composed with ``TINY``, then the test
    module's ``TINY_EXTRA`` (if it has one), then ``overrides``."""
    extra = getattr(request.module, "TINY_EXTRA", ())

    def compose_tiny(*overrides: str):
        with initialize_config_module(config_module="loopzoo.conf", version_base="1.3"):
            return compose(config_name="config", overrides=[*TINY, *extra, *overrides])

    return compose_tiny
