"""Read run records from ``DIR/records/*.json``; foreign or broken files are skipped, not fatal."""

from __future__ import annotations

import json
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from loopzoo._registry import unknown_choice

__all__ = [
    "KINDS",
    "UNRANKED",
    "Convergence",
    "DataFile",
    "Tuning",
    "RECORD_SCHEMA",
    "STATUSES",
    "ReportInputError",
    "Run",
    "Skipped",
    "finite_number",
    "load_runs",
    "parse_run",
]

RECORD_SCHEMA = "loopzoo.run/1"
STATUSES = ("ok", "diverged", "failed", "skipped")
# "bound": an exact optimum or noise floor, shown apart and never ranked or recommended.
# "reference": a line that is not a model either (a compressor's rate), shown apart, never ranked.
KINDS = ("model", "baseline", "bound", "reference")
UNRANKED = ("bound", "reference")


class ReportInputError(ValueError):
    """The report cannot be built from this directory (missing, or no usable records)."""


@dataclass(frozen=True)
class Tuning:
    """The record's ``tuning`` field: the trial budget, what was searched and chosen, and the
    validation score of every complete trial (``values``, in trial order)."""

    trials: int | None
    completed: int | None
    sampler: str | None
    chosen: Mapping[str, Any]
    at_bound: tuple[str, ...]
    values: tuple[float, ...]


@dataclass(frozen=True)
class Convergence:
    """The record's ``convergence`` field: why training stopped (``early_stop``, ``step_cap``,
    ``diverged``) and at which steps."""

    stopped: str | None
    best_step: int | None
    steps: int | None
    max_steps: int | None


@dataclass(frozen=True, order=True)
class DataFile:
    """One user file a run read (``data.files``): its role (the task option), path and hash."""

    role: str
    path: str
    sha256: str


@dataclass(frozen=True)
class Run:
    """One run record, reduced to the fields the report reads.

    ``source`` is the file's path relative to the output directory. ``task_variant`` and
    ``row_variant`` hold the settings that separate otherwise same-named tasks / rows (task
    options; model options, feedback and budget), as sorted ``(dotted key, JSON value)`` pairs.
    ``options`` are the model's constructor options (``config.model.options`` with the tuned
    values of ``tuning.chosen`` over them). Fields that older records lack are None
    (``seed_dependent`` True): the report says "not recorded".
    """

    source: str
    run_id: str
    kind: str
    status: str
    reason: str | None
    diverged_at_step: int | None
    model: str
    task: str
    seed: int
    params: int | None
    primary: tuple[str, str] | None
    metrics: Mapping[str, Any]
    curves: Mapping[str, Any] | None
    cost: Mapping[str, Any] | None
    gradient_reach: Mapping[str, Any] | None
    feedback: Mapping[str, Any] | None
    finished: str
    task_variant: tuple[tuple[str, str], ...]
    row_variant: tuple[tuple[str, str], ...]
    options: Mapping[str, Any]
    tuning: Tuning | None
    convergence: Convergence | None
    reproduce: str | None
    artifact: str | None
    seed_dependent: bool
    details: Mapping[str, Any] | None
    data_files: tuple[DataFile, ...] | None


@dataclass(frozen=True)
class Skipped:
    """A file under ``records/`` that the report did not use, and why."""

    source: str
    reason: str


def finite_number(value: object) -> float | None:
    """``value`` as a float when it is a finite int/float (not a bool), else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    number = float(value)
    return number if math.isfinite(number) else None


def _flatten(prefix: str, value: object) -> list[tuple[str, str]]:
    if isinstance(value, Mapping):
        pairs: list[tuple[str, str]] = []
        for key in sorted(value, key=str):
            pairs.extend(_flatten(f"{prefix}.{key}" if prefix else str(key), value[key]))
        return pairs
    return [(prefix, json.dumps(value, sort_keys=True))]


def _mapping_or_none(record: Mapping[str, Any], field: str) -> Mapping[str, Any] | None:
    value = record.get(field)
    if value is None:
        return None
    if not isinstance(value, Mapping):
        raise ValueError(f"field {field!r} is {type(value).__name__}; expected an object or null")
    return value


def _text_field(record: Mapping[str, Any], field: str) -> str:
    value = record.get(field)
    if not isinstance(value, str) or not value:
        raise ValueError(f"field {field!r} is {value!r}; expected a non-empty string")
    return value


def _choice_field(record: Mapping[str, Any], field: str, choices: tuple[str, ...]) -> str:
    value = record.get(field)
    if value not in choices:
        raise unknown_choice(f"value of field {field!r}:", value, list(choices))
    return str(value)


def _primary(record: Mapping[str, Any]) -> tuple[str, str] | None:
    primary = record.get("primary")
    if primary is None:
        return None
    if (
        not isinstance(primary, Mapping)
        or not isinstance(primary.get("name"), str)
        or primary.get("goal") not in ("min", "max")
    ):
        raise ValueError(
            f"field 'primary' is {primary!r}; expected {{'name': <metric>, 'goal': 'min'|'max'}}"
        )
    return primary["name"], primary["goal"]


def _integer(value: object) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _text(value: object) -> str | None:
    return value if isinstance(value, str) and value else None


def _tuning(record: Mapping[str, Any]) -> Tuning | None:
    tuning = _mapping_or_none(record, "tuning")
    if tuning is None:
        return None
    values = tuning.get("values")
    scores = tuple(
        v for v in (finite_number(x) for x in (values if isinstance(values, list) else []))
        if v is not None
    )
    chosen = tuning.get("chosen")
    at_bound = tuning.get("at_bound")
    return Tuning(
        trials=_integer(tuning.get("trials")),
        completed=_integer(tuning.get("completed")),
        sampler=_text(tuning.get("sampler")),
        chosen=chosen if isinstance(chosen, Mapping) else {},
        at_bound=tuple(str(n) for n in at_bound) if isinstance(at_bound, list) else (),
        values=scores,
    )


def _convergence(record: Mapping[str, Any]) -> Convergence | None:
    convergence = _mapping_or_none(record, "convergence")
    if convergence is None:
        return None
    return Convergence(
        stopped=_text(convergence.get("stopped")),
        best_step=_integer(convergence.get("best_step")),
        steps=_integer(convergence.get("steps")),
        max_steps=_integer(convergence.get("max_steps")),
    )


def _data_files(record: Mapping[str, Any]) -> tuple[DataFile, ...] | None:
    data = _mapping_or_none(record, "data")
    files = None if data is None else data.get("files")
    if not isinstance(files, list):
        return None
    found = []
    for entry in files:
        if isinstance(entry, Mapping) and _text(entry.get("sha256")):
            role = _text(entry.get("role")) or _text(entry.get("path")) or "file"
            found.append(DataFile(role, _text(entry.get("path")) or role, entry["sha256"]))
    return tuple(sorted(found, key=lambda f: (f.role, f.path)))


def _options(record: Mapping[str, Any], tuning: Tuning | None) -> dict[str, Any]:
    config = record.get("config")
    model = config.get("model") if isinstance(config, Mapping) else None
    options = model.get("options") if isinstance(model, Mapping) else None
    merged = dict(options) if isinstance(options, Mapping) else {}
    if tuning is not None:
        # Tuned values are what was trained; names the topology does not take (the optimiser's
        # learning rate, weight decay) are filtered out where the label is made.
        merged.update(tuning.chosen)
    return merged


def _variants(record: Mapping[str, Any], kind: str) -> tuple[tuple, tuple]:
    config = record.get("config")
    config = config if isinstance(config, Mapping) else {}
    task_config = config.get("task")
    task_options = task_config.get("options") if isinstance(task_config, Mapping) else None
    task_variant = tuple(_flatten("", task_options or {}))
    if kind != "model":
        return task_variant, ()
    model_config = config.get("model")
    model_config = model_config if isinstance(model_config, Mapping) else {}
    row_settings = {
        "options": model_config.get("options") or {},
        "feedback": model_config.get("feedback"),
        "budget": record.get("budget"),
    }
    return task_variant, tuple(_flatten("", row_settings))


def parse_run(record: object, source: str) -> Run:
    """Check one decoded record and reduce it to a :class:`Run`; ValueError names the field."""
    if not isinstance(record, Mapping):
        raise ValueError(f"top level is {type(record).__name__}; expected a JSON object")
    if record.get("schema") != RECORD_SCHEMA:
        raise ValueError(f"field 'schema' is {record.get('schema')!r}; expected {RECORD_SCHEMA!r}")
    kind = _choice_field(record, "kind", KINDS)
    status = _choice_field(record, "status", STATUSES)
    seed = record.get("seed")
    if isinstance(seed, bool) or not isinstance(seed, int):
        raise ValueError(f"field 'seed' is {seed!r}; expected an integer")
    params = record.get("params")
    if params is not None and (isinstance(params, bool) or not isinstance(params, int)):
        raise ValueError(f"field 'params' is {params!r}; expected an integer or null")
    metrics = _mapping_or_none(record, "metrics") or {}
    step = record.get("diverged_at_step")
    task_variant, row_variant = _variants(record, kind)
    reason = record.get("reason")
    finished = record.get("finished")
    tuning = _tuning(record)
    return Run(
        source=source,
        run_id=_text_field(record, "run_id"),
        kind=kind,
        status=status,
        reason=None if reason is None else str(reason),
        diverged_at_step=step if isinstance(step, int) and not isinstance(step, bool) else None,
        model=_text_field(record, "model"),
        task=_text_field(record, "task"),
        seed=seed,
        params=params,
        primary=_primary(record),
        metrics=metrics,
        curves=_mapping_or_none(record, "curves"),
        cost=_mapping_or_none(record, "cost"),
        gradient_reach=_mapping_or_none(record, "gradient_reach"),
        feedback=_mapping_or_none(record, "feedback"),
        finished=finished if isinstance(finished, str) else "",
        task_variant=task_variant,
        row_variant=row_variant,
        options=_options(record, tuning) if kind == "model" else {},
        tuning=tuning,
        convergence=_convergence(record),
        reproduce=_text(record.get("reproduce")),
        artifact=_text(record.get("artifact")),
        seed_dependent=record.get("seed_dependent") is not False,
        details=_mapping_or_none(record, "details"),
        data_files=_data_files(record),
    )


def load_runs(directory: str | os.PathLike[str]) -> tuple[list[Run], list[Skipped]]:
    """All usable records of ``directory/records/*.json`` (sorted by file name) and the skipped.

    Raises :class:`ReportInputError` when the directory or its ``records/`` folder is missing.
    """
    root = Path(directory)
    if not root.is_dir():
        raise ReportInputError(
            f"output directory {str(directory)!r} does not exist or is not a folder"
        )
    records_dir = root / "records"
    if not records_dir.is_dir():
        raise ReportInputError(
            f"no 'records' folder in {str(directory)!r}; expected run records at records/*.json "
            "(written by 'loopzoo train' / 'loopzoo sweep')"
        )
    runs: list[Run] = []
    skipped: list[Skipped] = []
    for path in sorted(records_dir.glob("*.json")):
        source = f"records/{path.name}"
        try:
            record = json.loads(path.read_text(encoding="utf-8"))
            runs.append(parse_run(record, source))
        except (OSError, UnicodeDecodeError) as error:
            skipped.append(Skipped(source, f"unreadable: {error.__class__.__name__}"))
        except json.JSONDecodeError as error:
            skipped.append(Skipped(source, f"not valid JSON (line {error.lineno}: {error.msg})"))
        except ValueError as error:
            skipped.append(Skipped(source, str(error)))
    return runs, skipped
