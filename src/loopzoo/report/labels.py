"""Row and task labels: a row's options that differ from its topology's defaults are part of its
name (``residual-skip[mode=scaled,scale=1]``), so no variant is read as the whole family."""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping
from typing import Any

__all__ = ["option_label", "variant_labels"]

# Options the harness sets from the task, not choices of a variant (output feedback's output kind
# follows the task's kind): left out of labels.
TASK_DECIDED = frozenset({"output_kind"})


def _defaults(topology: str) -> Mapping[str, Any] | None:
    """The registered topology's option defaults; None for a name the library does not know."""
    from loopzoo.topologies import TOPOLOGIES

    try:
        specs = TOPOLOGIES.get(topology).option_specs
    except (ValueError, TypeError, AttributeError):
        return None
    return {name: getattr(spec, "default", None) for name, spec in specs.items()}


def _text(value: Any) -> str:
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if isinstance(value, float):
        return f"{value:g}"
    return str(value) if isinstance(value, (int, str)) else json.dumps(value, sort_keys=True)


def option_label(topology: str, options: Mapping[str, Any]) -> str:
    """``topology`` followed by ``[name=value,...]`` for every option (sorted) whose value differs
    from the topology's default; the bare name when none does or the topology is unknown.

    Example: ``option_label("residual-skip", {"mode": "scaled", "scale": 1.0})`` gives
    ``residual-skip[mode=scaled,scale=1]`` while the default mode is ``gated``.
    """
    defaults = _defaults(topology)
    if not defaults:
        return topology
    differing = [
        f"{name}={_text(value)}"
        for name, value in sorted(options.items())
        if name in defaults and name not in TASK_DECIDED and value != defaults[name]
    ]
    return f"{topology}[{','.join(differing)}]" if differing else topology


def variant_labels(name: str, variants: Iterable[tuple]) -> dict[tuple, str]:
    """Label each distinct variant by ``name`` plus only the settings that tell variants apart
    (``name (budget=5000)``); a single variant keeps ``name``."""
    distinct = sorted(set(variants))
    if len(distinct) == 1:
        return {distinct[0]: name}
    settings = [dict(v) for v in distinct]
    keys = sorted({k for s in settings for k in s})
    differing = [k for k in keys if len({s.get(k) for s in settings}) > 1]
    labels = {}
    for variant, setting in zip(distinct, settings, strict=True):
        parts = [f"{k.removeprefix('options.')}={setting.get(k, 'unset')}" for k in differing]
        labels[variant] = f"{name} ({', '.join(parts)})"
    return labels
