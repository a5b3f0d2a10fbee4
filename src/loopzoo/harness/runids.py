"""Run ids derived from a run's content, so the same config always maps to the same record."""

from __future__ import annotations

import hashlib
import json
import re
from typing import Any

from omegaconf import DictConfig, OmegaConf

from loopzoo.harness.errors import ConfigError
from loopzoo.tasks import TASKS

__all__ = ["IDENTITY_EXCLUDED", "data_files", "identity", "run_id", "baseline_run_id",
           "baseline_group"]

# Keys that change where or how visibly a run happens, never its result. Launcher settings live
# under `hydra`, which a job's config does not contain.
IDENTITY_EXCLUDED: tuple[str, ...] = (
    "out",
    "per_task",
    "protocol.storage",
    "trainer.enable_progress_bar",
    "trainer.enable_model_summary",
)

_UNSAFE = re.compile(r"[^A-Za-z0-9_.-]+")


def data_files(cfg: DictConfig | dict[str, Any]) -> list[dict[str, Any]]:
    """``{"role", "path", "sha256", "bytes"}`` of each user file the run's task reads now (the
    task options named by its class's ``file_options``); empty for generated and open data.

    A file that is missing or unreadable is a ``ConfigError`` naming the option.
    """
    from loopzoo.tasks._files import fingerprint

    task = cfg.get("task")
    if task is None or task.get("name") not in TASKS.names():
        return []
    options = task.get("options") or {}
    files = []
    for role in TASKS.get(task.get("name")).file_options:
        path = options.get(role)
        if path is None:
            continue
        try:
            files.append({"role": role, **fingerprint(str(path), what="file")})
        except (OSError, ValueError) as error:
            raise ConfigError(f"task.options.{role}: {error}") from None
    return files


def identity(cfg: DictConfig | dict[str, Any]) -> dict[str, Any]:
    """The resolved config minus ``IDENTITY_EXCLUDED``, plus the SHA-256 of every user file the
    task reads (``data``: ``[{"role", "sha256"}]``, absent when there is none): what a run's
    result depends on. A changed file therefore means new run ids."""
    data = OmegaConf.to_container(cfg, resolve=True) if isinstance(cfg, DictConfig) else cfg
    data = json.loads(json.dumps(data))  # a deep copy that also proves it is JSON-serialisable
    data.pop("hydra", None)
    data.pop("data", None)
    for dotted in IDENTITY_EXCLUDED:
        *parents, leaf = dotted.split(".")
        node = data
        for key in parents:
            node = node.get(key) if isinstance(node, dict) else None
        if isinstance(node, dict):
            node.pop(leaf, None)
    files = data_files(data)
    if files:
        data["data"] = [{"role": f["role"], "sha256": f["sha256"]} for f in files]
    return data


def _digest(content: Any) -> str:
    canonical = json.dumps(content, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(canonical.encode("utf-8")).hexdigest()[:10]


def _slug(text: object) -> str:
    return _UNSAFE.sub("_", str(text))


def run_id(cfg: DictConfig | dict[str, Any]) -> str:
    """``<task>-<model>-s<seed>-<hash>``, the hash over ``identity(cfg)``.

    Example: ``run_id(cfg)`` -> ``"adding-stacked-s1-3f9a2c1b7d"``; changing ``out`` keeps it.
    """
    content = identity(cfg)
    return (
        f"{_slug(content['task']['name'])}-{_slug(content['model']['name'])}"
        f"-s{_slug(content['seed'])}-{_digest(content)}"
    )


def baseline_group(cfg: DictConfig | dict[str, Any]) -> str:
    """Hash of what a task's comparison rows depend on: the task config, its files, the suite
    and the seed; the seed only for tasks whose data change with it (``seed_changes_data``), so
    rows of a fixed record are computed once and carry the seed of the run that computed them."""
    content = identity(cfg)
    group = {"task": content["task"], "suite": content.get("suite")}
    if TASKS.get(content["task"]["name"]).seed_changes_data:
        group["seed"] = content["seed"]
    if "data" in content:
        group["data"] = content["data"]
    return _digest(group)


def baseline_run_id(cfg: DictConfig | dict[str, Any], baseline: str) -> str:
    """``<task>-<baseline>-s<seed>-<group hash>`` for one classical baseline of the run's task."""
    content = identity(cfg)
    return (
        f"{_slug(content['task']['name'])}-{_slug(baseline)}-s{_slug(content['seed'])}"
        f"-{baseline_group(content)}"
    )
