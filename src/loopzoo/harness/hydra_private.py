"""The pieces of Hydra that loopzoo uses although Hydra does not publish them, in one place.

Each function says which public API it stands in for. ``tests/harness/test_hydra_private.py``
checks every one against the installed Hydra, so an upgrade that breaks one fails there, by name,
rather than somewhere inside a sweep.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable

from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
from hydra.core.override_parser.types import Override

__all__ = ["missing_config", "not_in_struct", "run_multirun", "split_jobs"]

_MISSING = re.compile(r"Could not find '([^']+)'")
_NOT_IN_STRUCT = re.compile(r"Could not (?:override|append to|delete from)(?: config\.)? '([^']+)'")


def split_jobs(overrides: list[Override]) -> list[list[str]]:
    """The jobs of a sweep, one override list each, in Hydra's launch order.

    Stands in for a public "expand these sweep overrides" API, which Hydra lacks: it is the
    basic sweeper's own ``BasicSweeper.split_arguments`` (Hydra 1.3), so the plan matches what
    the multirun launches.
    """
    return [list(job) for batch in BasicSweeper.split_arguments(overrides, None) for job in batch]


def missing_config(message: str) -> str | None:
    """``group/name`` from Hydra's "Could not find 'group/name'" error, else None.

    Stands in for a structured field on ``MissingConfigException``, which has none for the
    missing option; the message's wording is Hydra 1.3's.
    """
    found = _MISSING.search(message)
    return found.group(1) if found else None


def not_in_struct(message: str) -> str | None:
    """The dotted key of Hydra's "Could not override 'key'" (or append to / delete from) error.

    Stands in for a structured field naming the key an override could not set (Hydra 1.3's
    ``ConfigCompositionException`` carries only the message).
    """
    found = _NOT_IN_STRUCT.search(message)
    return found.group(1) if found else None


def run_multirun(entry: Callable[[], object], overrides: list[str]) -> None:
    """Call a ``@hydra.main`` function as ``prog --multirun OVERRIDES`` from inside Python.

    Stands in for a public way to start Hydra's multirun with a given argument list: Hydra's
    ``hydra.main`` reads ``sys.argv`` only, so it is swapped for the call and restored after.
    """
    argv = sys.argv
    sys.argv = ["loopzoo", "--multirun", *overrides]
    try:
        entry()
    finally:
        sys.argv = argv
