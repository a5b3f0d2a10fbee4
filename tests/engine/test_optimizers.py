"""The engine's optimisers by name are the published update rules: each named optimiser takes
the same steps as torch's reference (single-tensor) implementation of that rule — Adam and
AdamW (Kingma & Ba 2015; Loshchilov & Hutter 2019), SGD with momentum, RMSprop — whichever
kernel the engine picks to run them."""

import pytest
import torch

from loopzoo.engine.optimizers import optimizer_factory


@pytest.mark.parametrize(("name", "extra", "reference"), [
    ("adam", {}, torch.optim.Adam),
    ("adamw", {"betas": [0.8, 0.99]}, torch.optim.AdamW),
    ("sgd", {"momentum": 0.9}, torch.optim.SGD),
    ("rmsprop", {"alpha": 0.9}, torch.optim.RMSprop),
])
def test_each_optimizer_steps_like_the_reference_implementation(name, extra, reference):
    torch.manual_seed(0)
    start = [torch.randn(7, 5), torch.randn(5)]
    ours = [p.clone().requires_grad_() for p in start]
    theirs = [p.clone().requires_grad_() for p in start]
    settings = {k: tuple(v) if isinstance(v, list) else v for k, v in extra.items()}
    make = optimizer_factory(name, lr=0.01, weight_decay=1e-3, extra=extra)
    optimizers = [make(ours), reference(theirs, lr=0.01, weight_decay=1e-3, foreach=False,
                                         **settings)]
    for _ in range(20):
        grads = [torch.randn_like(p) for p in start]
        for params, optimizer in zip((ours, theirs), optimizers, strict=True):
            for p, g in zip(params, grads, strict=True):
                p.grad = g.clone()
            optimizer.step()
    for a, b in zip(ours, theirs, strict=True):
        torch.testing.assert_close(a, b, atol=1e-6, rtol=1e-5)
