"""The search space of one (task, model) study: the optimiser's ranges plus the topology's own.

Where the ranges come from:

- ``protocol.space``: the optimiser's, ``lr`` and ``weight_decay`` (``optim.<name>``);
- the topology's declared ``tunable`` ranges (``loopzoo.topologies._search``), which
  ``model.tune`` may replace, extend (any constructor option, or ``feedback.<key>`` of the
  teacher-forcing schedule of a topology that feeds back its output) or drop (``null``).

An entry is ``{low, high}`` (integers when both are integers and the declared range, if any, is
an integer range), ``{low, high, log: true}`` or ``{choices: [...]}``; ``hard: [low]`` marks an
end that is a limit of the option itself (never reported as a bound worth widening).

Everything is checked before any training: unknown names, empty or inverted ranges, log ranges
reaching 0, and range ends the option itself would refuse, each naming the field and what is
accepted.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from omegaconf import DictConfig, OmegaConf

from loopzoo._registry import unknown_choice
from loopzoo.harness.errors import ConfigError, as_config_errors
from loopzoo.tasks import TASKS
from loopzoo.topologies import TOPOLOGIES
from loopzoo.topologies._search import Choices, IntegerRange, RealRange, SearchRange, check_range

__all__ = ["OPTIMIZER_TUNABLES", "FEEDBACK_KEYS", "Tunable", "search_space", "describe_space",
           "is_active", "apply_values", "at_bound"]

OPTIMIZER_TUNABLES = ("lr", "weight_decay")
"""Names ``protocol.space`` accepts; each sets ``optim.<name>``."""

FEEDBACK_KEYS = ("mode", "schedule", "k", "c", "e_min")
"""Keys of ``model.feedback`` a feedback topology may tune as ``feedback.<key>``."""

_ENTRY_KEYS = ("low", "high", "log", "hard", "choices")


@dataclass(frozen=True)
class Tunable:
    """One searched name: its record name, the config key it sets, and its range."""

    name: str
    path: str
    search: SearchRange


def _as_dict(cfg: DictConfig | Mapping[str, Any]) -> dict[str, Any]:
    if isinstance(cfg, DictConfig):
        return OmegaConf.to_container(cfg, resolve=True)
    return dict(cfg)


def _path(name: str) -> str:
    if name in OPTIMIZER_TUNABLES:
        return f"optim.{name}"
    if name.startswith("feedback."):
        return f"model.{name}"
    return f"model.options.{name}"


def _from_entry(field: str, entry: Any, declared: SearchRange | None) -> SearchRange:
    """A range from a config entry; the declared range's hard edges and condition are kept."""
    if not isinstance(entry, Mapping):
        raise ConfigError(f"{field} = {entry!r} is invalid; accepted: null, {{low, high}}, "
                          "{low, high, log: true} or {choices: [...]}")
    unknown = sorted(set(entry) - set(_ENTRY_KEYS))
    if unknown:
        raise ConfigError(f"{field} has unknown keys {unknown}; accepted: "
                          f"{', '.join(_ENTRY_KEYS)}")
    hard = entry.get("hard", getattr(declared, "hard", ()))
    if not isinstance(hard, (list, tuple)) or not set(hard) <= {"low", "high"}:
        raise ConfigError(f"{field}.hard = {hard!r} is invalid; accepted: a list of low / high "
                          "(range ends that are limits of the option itself)")
    hard = tuple(hard)
    only_if = getattr(declared, "only_if", {})
    if "choices" in entry:
        if set(entry) != {"choices"}:
            raise ConfigError(f"{field}: choices cannot be combined with low / high / log / hard")
        choices = entry["choices"]
        if not isinstance(choices, (list, tuple)):
            raise ConfigError(f"{field}.choices = {choices!r} is invalid; accepted: a list")
        search: SearchRange = Choices(tuple(choices), only_if=only_if)
    else:
        missing = [key for key in ("low", "high") if key not in entry]
        if missing:
            raise ConfigError(f"{field} lacks {', '.join(missing)}; accepted: {{low, high}}, "
                              "{low, high, log: true} or {choices: [...]}")
        low, high = entry["low"], entry["high"]
        log = entry.get("log", getattr(declared, "log", False))
        if not isinstance(log, bool):
            raise ConfigError(f"{field}.log = {log!r} is invalid; accepted: true or false")
        both_int = all(isinstance(v, int) and not isinstance(v, bool) for v in (low, high))
        integer = both_int and not log and not isinstance(declared, (RealRange, Choices))
        search = (IntegerRange(low, high, hard=hard, only_if=only_if) if integer
                  else RealRange(low, high, log=log, hard=hard, only_if=only_if))
    with as_config_errors():
        check_range(field, search)
    return search


def _endpoints(search: SearchRange) -> tuple[Any, ...]:
    return search.choices if isinstance(search, Choices) else (search.low, search.high)


def _check_against_option(field: str, name: str, search: SearchRange, cfg: dict[str, Any],
                          topology: Any) -> None:
    """Every range end (or choice) must be a value the option itself accepts."""
    if name in OPTIMIZER_TUNABLES:
        refused = [v for v in _endpoints(search)
                   if isinstance(v, bool) or not isinstance(v, (int, float))
                   or (v <= 0 if name == "lr" else v < 0)]
        if refused:
            accepted = "numbers > 0" if name == "lr" else "numbers >= 0"
            raise ConfigError(f"{field} holds {refused[0]!r}; accepted: {accepted}")
        return
    if name.startswith("feedback."):
        from loopzoo.engine.schedules import TeacherForcingPlan

        base = dict(cfg["model"].get("feedback") or {})
        for value in _endpoints(search):
            try:
                TeacherForcingPlan.from_options({**base, name.split(".", 1)[1]: value},
                                                total_steps=1)
            except ValueError as error:
                raise ConfigError(f"{field}: the value {value!r} is refused: {error}") from None
        return
    spec = topology.option_specs[name]
    for value in _endpoints(search):
        with as_config_errors():
            spec.check(f"{field} value", value)


def _accepted_model_names(topology: Any) -> list[str]:
    names = list(topology.option_specs)
    if topology.feeds_back_output:
        names += [f"feedback.{key}" for key in FEEDBACK_KEYS]
    return names


def _flatten_feedback(tune: Mapping[str, Any]) -> dict[str, Any]:
    """``model.tune.feedback.k`` (how Hydra nests it) becomes the name ``feedback.k``."""
    flat = {name: entry for name, entry in tune.items() if name != "feedback"}
    nested = tune.get("feedback")
    if isinstance(nested, Mapping):
        flat.update({f"feedback.{key}": entry for key, entry in nested.items()})
    elif "feedback" in tune:
        flat["feedback"] = nested
    return flat


def search_space(cfg: DictConfig | Mapping[str, Any]) -> list[Tunable]:
    """The checked search space of ``cfg``'s (task, model): optimiser names first, then the
    topology's in declaration order, then names added by ``model.tune``.

    Raises ``ConfigError`` naming the field for an unknown name or a bad range.

    Example::

        [t.name for t in search_space(cfg)]   # ['lr', 'weight_decay', 'num_layers', 'dropout']
    """
    data = _as_dict(cfg)
    protocol_space = (data.get("protocol") or {}).get("space") or {}
    if not isinstance(protocol_space, Mapping):
        raise ConfigError(f"protocol.space = {protocol_space!r} is invalid; accepted: a mapping "
                          f"of {', '.join(OPTIMIZER_TUNABLES)} to ranges")
    topology = TOPOLOGIES.get(data["model"]["name"])
    tune = data["model"].get("tune") or {}
    if not isinstance(tune, Mapping):
        raise ConfigError(f"model.tune = {tune!r} is invalid; accepted: a mapping of option "
                          "names to ranges (or null to keep an option fixed)")
    tune = _flatten_feedback(tune)
    space: list[Tunable] = []
    for name, entry in protocol_space.items():
        if name not in OPTIMIZER_TUNABLES:
            raise ConfigError(f"protocol.space.{name}: "
                              f"{unknown_choice('tunable name', name, list(OPTIMIZER_TUNABLES))}")
        if entry is not None:
            search = _from_entry(f"protocol.space.{name}", entry, None)
            _check_against_option(f"protocol.space.{name}", name, search, data, topology)
            space.append(Tunable(name, _path(name), search))
    accepted = _accepted_model_names(topology)
    for name in tune:
        if name not in accepted:
            error = unknown_choice(f"tunable name of model {topology.topology!r}", name, accepted)
            raise ConfigError(f"model.tune.{name}: {error}")
    names = [*topology.tunable, *(n for n in tune if n not in topology.tunable)]
    task = data["task"]["name"]
    if not TASKS.get(task).targets_observed:
        # Nothing is teacher-forced where targets are never observed (the run trains free
        # running), so the teacher-forcing schedule has no effect there: not searched.
        asked = [n for n in tune if n.startswith("feedback.") and tune[n] is not None]
        if asked:
            raise ConfigError(f"model.tune.{asked[0]}: task {task!r} never observes its targets, "
                              "so output feedback trains free running and the teacher-forcing "
                              f"schedule has no effect; accepted: model.tune.{asked[0]}=null")
        names = [n for n in names if not n.startswith("feedback.")]
    for name in names:
        declared = topology.tunable.get(name)
        if name in tune:
            if tune[name] is None:
                continue
            search = _from_entry(f"model.tune.{name}", tune[name], declared)
        else:
            search = declared
        field = f"model.tune.{name}"
        _check_against_option(field, name, search, data, topology)
        space.append(Tunable(name, _path(name), search))
    _check_conditions(space, data)
    return space


def _fixed_value(data: dict[str, Any], name: str) -> Any:
    node: Any = data
    for key in _path(name).split("."):
        node = node.get(key) if isinstance(node, Mapping) else None
    return node


def _check_conditions(space: list[Tunable], data: dict[str, Any]) -> None:
    seen: set[str] = set()
    for tunable in space:
        for name in tunable.search.only_if:
            if name not in seen and _fixed_value(data, name) is None and name not in (
                    t.name for t in space):
                raise ConfigError(f"model.tune.{tunable.name} is searched only if {name} has "
                                  f"certain values, but {name} is neither set nor searched")
        seen.add(tunable.name)


def is_active(tunable: Tunable, chosen: Mapping[str, Any], data: Mapping[str, Any]) -> bool:
    """True when every ``only_if`` condition holds, reading earlier choices, else the config."""
    for name, values in tunable.search.only_if.items():
        value = chosen[name] if name in chosen else _fixed_value(dict(data), name)
        if value not in values:
            return False
    return True


def describe_space(space: list[Tunable]) -> dict[str, dict[str, Any]]:
    """``{name: range description}`` for records and the stored study (JSON data)."""
    return {t.name: t.search.describe() for t in space}


def apply_values(cfg: DictConfig, values: Mapping[str, Any]) -> DictConfig:
    """A copy of ``cfg`` with each tuned value written to its config key."""
    out = cfg.copy()
    OmegaConf.set_struct(out, False)
    for name, value in values.items():
        OmegaConf.update(out, _path(name), value, merge=False)
    OmegaConf.set_struct(out, True)
    return out


def at_bound(space: list[Tunable], values: Mapping[str, Any]) -> list[str]:
    """Names whose chosen value sits at a soft edge of its range (see ``_search.at_edge``)."""
    return [t.name for t in space if t.name in values and t.search.at_edge(values[t.name])]
