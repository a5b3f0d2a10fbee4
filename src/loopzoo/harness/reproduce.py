"""The one ``loopzoo train`` command that trains a recorded run again, without tuning.

The command names the topology, the task and the suite (if any), then every config value that
differs from what those compose to, with the tuned values written in and ``protocol.trials=null``
(train these values as given). Composing its overrides gives the run's config back exactly
(``tests/harness/test_reproduce.py``); with the same seed and thread count the training repeats.
"""

from __future__ import annotations

import json
import re
from typing import Any

from omegaconf import DictConfig, OmegaConf, open_dict

from loopzoo.harness.config import apply_per_task, compose_job, composer
from loopzoo.harness.runids import IDENTITY_EXCLUDED

__all__ = ["reproduce_overrides", "reproduce_command"]

_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_./-]*$")


def _value(value: Any) -> str:
    """A value in Hydra's override grammar."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        reserved = value.lower() in ("null", "true", "false", "nan", "inf", "-inf")
        if _PLAIN.match(value) and not reserved:
            return value
        return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"
    if isinstance(value, list):
        return "[" + ",".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ",".join(f"{k}:{_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(f"cannot write {type(value).__name__} as an override")


def _diff(base: Any, target: Any, prefix: str, out: list[str]) -> None:
    if isinstance(base, dict) and isinstance(target, dict) and target:
        for key, value in target.items():
            path = f"{prefix}{key}"
            if path in IDENTITY_EXCLUDED:
                continue
            if key not in base:
                out.append(f"+{path}={_value(value)}")
            else:
                _diff(base[key], value, path + ".", out)
        for key in base:
            if key not in target and f"{prefix}{key}" not in IDENTITY_EXCLUDED:
                out.append(f"~{prefix}{key}")
        return
    if prefix.rstrip(".") in IDENTITY_EXCLUDED:
        return
    if json.dumps(base, sort_keys=True) != json.dumps(target, sort_keys=True):
        out.append(f"{prefix.rstrip('.')}={_value(target)}")


def reproduce_overrides(cfg: DictConfig, *, out: str) -> list[str]:
    """Overrides of ``loopzoo train`` that compose to ``cfg`` (a finished job config) with
    ``protocol.trials=null`` and ``out=out``."""
    target = OmegaConf.to_container(cfg, resolve=True)
    target["protocol"]["trials"] = None
    head = [f"model={target['model']['name']}", f"task={target['task']['name']}"]
    if target.get("suite"):
        head.append(f"suite={target['suite']}")
    with composer():
        raw = compose_job(head, with_hydra=True)
    with open_dict(raw):
        del raw["hydra"]
    raw = apply_per_task(raw, head)
    # Required values the head leaves open (``???``) are compared as such and always written.
    base = OmegaConf.to_container(raw, resolve=True, throw_on_missing=False)
    base.pop("per_task", None)
    changes: list[str] = []
    _diff(base, target, "", changes)
    changes = [c for c in changes if not c.startswith("seed=")]
    return [*head, f"seed={target['seed']}", *changes, f"out={out}"]


def reproduce_command(cfg: DictConfig, *, out: str) -> str:
    """``loopzoo train ...``: one shell line (arguments quoted for a POSIX shell)."""
    import shlex

    return "loopzoo train " + " ".join(shlex.quote(a) for a in reproduce_overrides(cfg, out=out))
