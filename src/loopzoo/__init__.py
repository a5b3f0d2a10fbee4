"""loopzoo: interchangeable recurrent topologies behind one module interface.

    import loopzoo
    model = loopzoo.create("stacked", input_size=3, output_size=2, hidden_size=64)
    y, state = model(x)          # x: (B, T, 3) -> y: (B, T, 2)
"""

import sys

from loopzoo import tasks
from loopzoo.serve import artifacts, streaming
from loopzoo.serve.artifacts import load, save
from loopzoo.topologies import available, create, width_for_budget

# The serving modules' former paths: ``import loopzoo.streaming`` / ``loopzoo.artifacts`` keep
# working and give the very same module objects as ``loopzoo.serve.*``.
sys.modules[f"{__name__}.artifacts"] = artifacts
sys.modules[f"{__name__}.streaming"] = streaming

__version__ = "0.1.0"

__all__ = ["available", "create", "load", "save", "tasks", "width_for_budget", "__version__"]
