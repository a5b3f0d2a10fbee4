"""What ``loopzoo options`` prints: every option of a task or topology with its configured value,
what is accepted and one line of meaning, all derived from the code that checks the options.

- Topologies: ``option_specs`` (``Option.default``, ``Option.help``); the accepted values are
  what the option's own check says when it refuses a value.
- Tasks: the fields of the ``Options`` dataclass; the meaning is the comment on the field (the
  base-most class that comments it), the accepted values what ``__post_init__`` says when it
  refuses a value of that field.
- The value shown is the one in the shipped config (``conf/<group>/<name>.yaml``), which is what
  a run uses unless overridden; the code's own default is added when it differs.

No Hydra import: this is as quick as ``loopzoo list``.
"""

from __future__ import annotations

import ast
import dataclasses
import inspect
import io
import re
import tokenize
from dataclasses import dataclass
from importlib import resources
from typing import Any

from loopzoo.harness.shipped import CONFIG_MODULE

__all__ = ["OptionHelp", "model_options", "render", "task_options"]

_MISSING = "???"
# Values no check accepts: an arbitrary object, a very small and a very large number.
_PROBES = (object(), -10**18, 10**18)
# loopzoo._checks.invalid's wording: "<field> = <value> is invalid; accepted: <what>[. Did ...]"
_INVALID = re.compile(r"^(?P<field>[\w\[\]]+) = .*? is invalid; accepted: (?P<what>.*?)"
                      r"(?:\. Did you mean .*)?$", re.S)
_ONE_OF = re.compile(r"^unknown (?P<field>\S+) .*?; available: (?P<what>[^.]*)", re.S)


@dataclass(frozen=True)
class OptionHelp:
    """One option: its name, configured value, the code's default, accepted values, meaning."""

    name: str
    value: Any
    default: Any
    accepted: str
    meaning: str


def _shipped(group: str, name: str) -> dict[str, Any]:
    import yaml

    text = resources.files(CONFIG_MODULE).joinpath(group, f"{name}.yaml").read_text("utf-8")
    return (yaml.safe_load(text) or {}).get("options") or {}


def _accepted(messages: list[str], field: str) -> str:
    """The "accepted: ..." parts of refusal messages about ``field``, in order, no repeats."""
    found: list[str] = []
    for message in messages:
        match = _INVALID.match(message) or _ONE_OF.match(message)
        if match is None or not match.group("field").startswith(field):
            continue
        what = match.group("what").strip()
        what = f"one of {what}" if match.re is _ONE_OF else what
        if what not in found:
            found.append(what)
    return "; ".join(found) or "see the task's documentation"


def model_options(name: str) -> list[OptionHelp]:
    """The options of topology ``name`` (``loopzoo.create`` keywords besides the sizes)."""
    from loopzoo.topologies import TOPOLOGIES

    specs = TOPOLOGIES.get(name).option_specs
    shipped = _shipped("model", name)
    rows = []
    for option, spec in specs.items():
        messages = []
        for probe in _PROBES:
            try:
                spec.check(option, probe)
            except (ValueError, TypeError) as error:
                messages.append(str(error))
        rows.append(OptionHelp(option, shipped.get(option, spec.default), spec.default,
                               _accepted(messages, option), spec.help))
    return rows


def _field_comments(cls: type) -> dict[str, str]:
    """Field name -> the comment after its definition in ``cls``'s own source (plus comment-only
    lines right below it)."""
    try:
        source = inspect.getsource(cls)
    except (OSError, TypeError):  # no source shipped
        return {}
    source = inspect.cleandoc("\n" + source) if source.startswith(" ") else source
    comments: dict[int, str] = {}
    for token in tokenize.generate_tokens(io.StringIO(source).readline):
        if token.type == tokenize.COMMENT:
            comments[token.start[0]] = token.string.lstrip("#").strip()
    lines = source.splitlines()
    found = {}
    for node in ast.parse(source).body[0].body:
        if isinstance(node, ast.AnnAssign) and isinstance(node.target, ast.Name):
            line = node.end_lineno or node.lineno
            parts = [comments[line]] if line in comments else []
            following = line + 1
            while following in comments and lines[following - 1].lstrip().startswith("#"):
                parts.append(comments[following])
                following += 1
            if parts:
                found[node.target.id] = " ".join(parts)
    return found


def _meaning(options_type: type, field: str) -> str:
    for cls in reversed(options_type.__mro__):  # the base-most comment says what it means
        if field in getattr(cls, "__annotations__", {}):
            comment = _field_comments(cls).get(field)
            if comment:
                return comment
    return ""


def task_options(name: str) -> list[OptionHelp]:
    """The options of task ``name`` (``loopzoo.tasks.create`` keywords)."""
    from loopzoo.tasks import TASKS

    options_type = TASKS.get(name).Options
    shipped = _shipped("task", name)
    fields = dataclasses.fields(options_type)
    # Required options get a stand-in so the checks of the others can run.
    stand_ins = {f.name: f"<{f.name}>" for f in fields if shipped.get(f.name) == _MISSING}
    rows = []
    for field in fields:
        default = field.default if field.default is not dataclasses.MISSING else None
        messages = []
        for probe in _PROBES:
            try:
                options_type(**{**stand_ins, field.name: probe})
            except (ValueError, TypeError) as error:
                messages.append(str(error))
        value = shipped.get(field.name, default)
        rows.append(OptionHelp(field.name, "required" if value == _MISSING else value,
                               list(default) if isinstance(default, tuple) else default,
                               _accepted(messages, field.name), _meaning(options_type,
                                                                          field.name)))
    return rows


def _show(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_show(v) for v in value) + "]"
    return str(value)


def render(group: str, name: str, rows: list[OptionHelp]) -> str:
    """The listing of one task or topology, one block per option."""
    lines = [f"{group} {name}: set with {group}.options.NAME=VALUE "
             f"(values below: conf/{group}/{name}.yaml)"]
    for row in rows:
        default = "" if row.value in ("required", row.default) or _show(row.value) == _show(
            row.default) else f"   (code default: {_show(row.default)})"
        lines.append(f"  {row.name} = {_show(row.value)}{default}")
        lines.append(f"      accepted: {row.accepted}")
        if row.meaning:
            lines.append(f"      {row.meaning}")
    return "\n".join(lines) + "\n"
