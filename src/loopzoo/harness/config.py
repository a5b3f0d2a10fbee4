"""Compose the shipped Hydra configs and turn every bad input into a ``ConfigError`` that names
the field, the value and what is accepted."""

from __future__ import annotations

import difflib
import os
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from typing import Any

from hydra import compose, initialize_config_module
from hydra.core.global_hydra import GlobalHydra
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.core.override_parser.types import Override
from hydra.errors import HydraException, MissingConfigException
from omegaconf import DictConfig, OmegaConf
from omegaconf.errors import MissingMandatoryValue, OmegaConfBaseException

from loopzoo._io import check_folder
from loopzoo._registry import unknown_choice
from loopzoo.engine.settings import RunSettings, read_settings
from loopzoo.harness.errors import ConfigError, as_config_errors
from loopzoo.harness.hydra_private import missing_config, not_in_struct
from loopzoo.harness.shipped import CONFIG_MODULE, shipped_options

__all__ = [
    "CONFIG_MODULE",
    "GROUPS",
    "cores",
    "output_kind",
    "group_options",
    "parse_overrides",
    "plain_task_options",
    "composer",
    "compose_job",
    "finish_config",
    "apply_per_task",
]

GROUPS = ("model", "task", "trainer", "optim", "protocol", "suite", "hydra/launcher")
# Launchers the installed Hydra plugins provide besides the shipped presets.
_PLUGIN_LAUNCHERS = ("basic", "joblib", "submitit_local", "submitit_slurm")


def cores() -> int:
    """CPU cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def output_kind(task: DictConfig) -> str:
    """``"classes"`` for a classification task, ``"real"`` otherwise (output-feedback's option).

    Used in ``conf/model/output-feedback.yaml`` as ``${loopzoo.output_kind:${task}}``; reads the
    registered task class's ``kind``.
    """
    from loopzoo.tasks import TASKS

    with as_config_errors():
        kind = getattr(TASKS.get(task.name), "kind", None)
    if kind not in ("regression", "classification"):
        raise ConfigError(f"task {task.name!r} has no fixed kind: set "
                          "model.options.output_kind=real or model.options.output_kind=classes")
    return "classes" if kind == "classification" else "real"


for _name, _resolver in (("loopzoo.cores", cores), ("loopzoo.output_kind", output_kind)):
    if not OmegaConf.has_resolver(_name):
        OmegaConf.register_new_resolver(_name, _resolver)


def group_options(group: str) -> list[str]:
    """The options of a config group: its shipped files, plus the plugins' launchers."""
    extra = list(_PLUGIN_LAUNCHERS) if group == "hydra/launcher" else []
    return sorted(set(shipped_options(group) + extra))


def parse_overrides(overrides: list[str]) -> list[Override]:
    """Hydra's parse of ``key=value`` overrides; a syntax error becomes a ``ConfigError``."""
    try:
        return OverridesParser.create().parse_overrides(overrides)
    except HydraException as error:
        raise ConfigError(f"cannot read the overrides: {error}") from None


def plain_task_options(overrides: list[str]) -> list[str]:
    """``+task.options.NAME=V`` read as ``++task.options.NAME=V`` (set or add).

    Every task option is declared in its ``conf/task`` file, so none needs ``+``; command lines
    written when they did keep working, and a name the task lacks is still refused by the task
    with the accepted ones.
    """
    return [f"+{o}" if o.startswith("+task.options.") else o for o in overrides]


def _flat_keys(node: Any, prefix: str = "") -> list[str]:
    if not isinstance(node, dict):
        return []
    keys: list[str] = []
    for key, value in node.items():
        path = f"{prefix}{key}"
        keys.append(path)
        keys.extend(_flat_keys(value, path + "."))
    return keys


def _unknown_key_error(key: str, valid: list[str]) -> ConfigError:
    parent = key.rpartition(".")[0]
    siblings = [k for k in valid if k.rpartition(".")[0] == parent]
    near = difflib.get_close_matches(key, valid, n=3, cutoff=0.5)
    hint = f" Nearest valid keys: {', '.join(near)}." if near else ""
    level = f" Keys under {parent!r}: {', '.join(siblings)}." if siblings and parent else ""
    tail = ("" if key.startswith("task.options.") else
            f" (A key the shipped configs lack can be added with +{key}=VALUE.)")
    return ConfigError(f"unknown config key {key!r}.{hint}{level}{tail}")


@contextmanager
def composer() -> Iterator[Any]:
    """A context in which ``compose_job`` may be called many times with one Hydra set-up."""
    if GlobalHydra.instance().is_initialized():
        yield compose
        return
    with initialize_config_module(config_module=CONFIG_MODULE, version_base="1.3"):
        yield compose


def _explain(error: Exception, overrides: list[str]) -> ConfigError:
    message = str(error)
    missing = missing_config(message)
    if isinstance(error, MissingConfigException) and missing:
        group, _, name = missing.rpartition("/")
        if group in GROUPS:
            return ConfigError(str(unknown_choice(group, name, group_options(group))))
    key = not_in_struct(message)
    if key:
        groups_only = [
            o for o in overrides if o.split("=", 1)[0].lstrip("+~") in GROUPS and "," not in o
        ]
        try:
            base = compose("config", overrides=groups_only)
        except (HydraException, OmegaConfBaseException):
            base = compose("config")
        valid = _flat_keys(OmegaConf.to_container(base, resolve=False))
        return _unknown_key_error(key, valid)
    return ConfigError(message.split("\nConfig search path")[0].strip())


def _choices(group: str) -> list[str]:
    """The names a group choice may take: the shipped files, the installed launchers, and what
    Hydra's config repository holds (configs a user registered in its ConfigStore or search
    path)."""
    names = set(group_options(group))
    if GlobalHydra.instance().is_initialized():
        with suppress(HydraException):
            names.update(GlobalHydra.instance().config_loader().get_group_options(group))
    return sorted(names)


def _check_group_choices(overrides: list[str]) -> None:
    """Every group choice is one of ``_choices``: never a path (``task=../../x``), so no file
    outside the configs is ever loaded."""
    for override in parse_overrides(overrides):
        group = override.key_or_group
        if group not in GROUPS or override.is_delete():
            continue
        if override.is_sweep_override():
            try:
                values = list(override.sweep_string_iterator())
            except (HydraException, NotImplementedError, TypeError, ValueError):
                continue  # glob(...) and ranges: Hydra expands them against the repository
        else:
            values = [override.value()]
        known = _choices(group)
        for value in values:
            if value is not None and value not in known:
                raise ConfigError(str(unknown_choice(group, value, known)))


def compose_job(overrides: list[str], *, with_hydra: bool = False) -> DictConfig:
    """The config of one run for ``overrides`` (call inside ``composer()``).

    Hydra's errors (unknown group options, unknown keys, bad syntax) are rewritten as
    ``ConfigError`` naming the value and the accepted ones. With ``with_hydra`` the ``hydra``
    node is kept (sweep lists, launcher) and ``finish_config`` is not applied.
    """
    overrides = plain_task_options(list(overrides))
    _check_group_choices(overrides)
    try:
        cfg = compose("config", overrides=overrides, return_hydra_config=with_hydra)
    except (HydraException, OmegaConfBaseException) as error:
        raise _explain(error, list(overrides)) from None
    return cfg if with_hydra else finish_config(cfg, overrides)


def _leaves(node: Any, prefix: str = "") -> list[str]:
    if not isinstance(node, dict) or not node:
        return [prefix.rstrip(".")]
    return [leaf for key, value in node.items() for leaf in _leaves(value, f"{prefix}{key}.")]


def apply_per_task(cfg: DictConfig, overrides: list[str]) -> DictConfig:
    """Merge the suite's ``per_task`` fragment for ``cfg``'s task; the command line still wins."""
    per_task = OmegaConf.to_container(cfg.per_task, resolve=False)
    known_tasks = group_options("task")
    for name in per_task:
        if name not in known_tasks:
            raise ConfigError(str(unknown_choice("task in per_task", name, known_tasks)))
    fragment = per_task.get(cfg.task.name)
    if not fragment:
        return cfg
    try:
        merged = OmegaConf.merge(cfg, fragment)
    except OmegaConfBaseException as error:
        raise ConfigError(
            f"per_task.{cfg.task.name} sets a key the config lacks: {error.full_key!r} "
            f"({type(error).__name__})"
        ) from None
    # The command line wins over the suite's per-task settings: re-apply its overrides there.
    leaves = _leaves(fragment)
    for override in parse_overrides(list(overrides)):
        key = override.key_or_group
        touches = any(leaf == key or leaf.startswith(key + ".") or key.startswith(leaf + ".")
                      for leaf in leaves)
        if not touches or override.is_delete() or override.is_sweep_override():
            continue
        if isinstance(OmegaConf.select(merged, key), DictConfig) and key in GROUPS:
            continue  # a group choice such as task=adding, already composed
        OmegaConf.update(merged, key, override.value(), merge=False,
                         force_add=override.is_add() or override.is_force_add())
    return merged


# Keys every run needs; the shipped configs set them, a ``~key`` override could remove them.
_REQUIRED = ("model.name", "model.options", "task.name", "task.options", "task.budget",
             "task.batch_size", "trainer", "optim", "protocol", "seed", "out", "suite")


def _check_names(cfg: DictConfig) -> None:
    for key in _REQUIRED:
        if OmegaConf.select(cfg, key, default="<missing>") == "<missing>":
            raise ConfigError(f"{key} is required; the shipped configs set it (was it deleted "
                              f"with ~{key}?)")
    if not isinstance(cfg.out, str) or not cfg.out:
        raise ConfigError(f"out must be a directory path, got {cfg.out!r}")
    settings = read_settings(cfg)  # what the engine reads (names, seed, trainer, optim, protocol)
    _check_out(cfg.out)
    _check_files(cfg)
    _check_options(settings)


def _check_options(settings: RunSettings) -> None:
    """The task's and the topology's options, checked without data. With ``read_settings`` and
    the file checks, a config refused here never reaches a run, a lock or the output folder."""
    from loopzoo.tasks import TASKS
    from loopzoo.tasks._options import build_options
    from loopzoo.topologies import parameter_count

    try:
        build_options(TASKS.get(settings.task).Options, settings.task, settings.task_options)
    except (ValueError, TypeError) as error:
        raise ConfigError(f"task {settings.task!r}: {error}") from None
    try:  # on the meta device: the option checks of the constructor, no memory
        parameter_count(settings.model, input_size=1, output_size=2, hidden_size=1,
                        **settings.model_options)
    except (ValueError, TypeError) as error:
        raise ConfigError(f"model {settings.model!r}: {error}") from None


def _check_out(out: str) -> None:
    """``out`` is a folder, or can be made as one, that this process may write in."""
    with as_config_errors():
        check_folder(out, "out")


def _check_files(cfg: DictConfig) -> None:
    """The task's input files exist and are readable before any run is planned or recorded."""
    from loopzoo.tasks import TASKS
    from loopzoo.tasks._files import check_input_file

    for role in TASKS.get(cfg.task.name).file_options:
        path = cfg.task.options.get(role)
        if path is None:
            continue
        if not isinstance(path, str) or not path:
            raise ConfigError(f"task.options.{role} must be a file path, got {path!r}")
        try:
            check_input_file(path, "file")
        except (OSError, ValueError) as error:
            raise ConfigError(f"task.options.{role}: {error}") from None


def finish_config(cfg: DictConfig, overrides: list[str]) -> DictConfig:
    """Apply the suite's ``per_task`` settings, resolve, check the run's settings, drop
    ``per_task``.

    The result is a struct-mode ``DictConfig`` without the ``hydra`` node: what a run records.
    Missing required values (``???``, e.g. the csv task's path) are refused by name.
    """
    cfg = apply_per_task(cfg, overrides)
    try:
        data = OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    except MissingMandatoryValue as error:
        raise ConfigError(
            f"{error.full_key} is required (model {cfg.model.name}, task {cfg.task.name}): "
            f"give {error.full_key}=VALUE"
        ) from None
    except OmegaConfBaseException as error:
        raise ConfigError(f"cannot resolve {error.full_key}: {error}") from None
    data.pop("hydra", None)
    data.pop("per_task", None)
    finished = OmegaConf.create(data)
    OmegaConf.set_struct(finished, True)
    _check_names(finished)
    return finished
