"""When and with what a run was made, for its record: UTC time stamps, library versions, data."""

from __future__ import annotations

import platform
from datetime import datetime, timezone
from typing import Any

__all__ = ["data_record", "utc_now", "versions"]


def utc_now() -> str:
    """The current time as ``YYYY-MM-DDTHH:MM:SSZ``."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def versions() -> dict[str, Any]:
    """Versions of python, torch, lightning, hydra and loopzoo, and torch's thread setting."""
    import hydra
    import lightning
    import torch

    import loopzoo

    return {
        "python": platform.python_version(),
        "torch": torch.__version__,
        "lightning": lightning.__version__,
        "hydra": hydra.__version__,
        "loopzoo": loopzoo.__version__,
        "torch_threads": torch.get_num_threads(),
        "torch_interop_threads": torch.get_num_interop_threads(),
    }


def data_record(task: Any) -> dict[str, Any]:
    """The record's ``data``: the user files read (``task.data_files()``) and ``task.describe()``
    (options chosen, split sizes and boundaries, context rows, filled values, scaling)."""
    return {"files": task.data_files(), "facts": task.describe()}
