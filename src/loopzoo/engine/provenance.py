"""When and with what a run was made: UTC time stamps and library versions, for its record."""

from __future__ import annotations

import platform
from datetime import datetime, timezone
from typing import Any

__all__ = ["utc_now", "versions"]


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
