"""Run records: one self-describing JSON file per run, written atomically.

Layout of an output directory ``DIR``::

    DIR/loopzoo-out.json          manifest: record schema, config version, suite
    DIR/records/<run_id>.json     one record per run (model runs and classical baselines)
    DIR/runs/<run_id>/            the run's own files (Lightning logs, artifact)
    DIR/records-damaged/          unreadable records set aside by a rerun (never deleted)

A record holds ``schema``, ``run_id``, ``kind`` ("model" | "baseline" | "bound" | "reference"),
``config`` (the resolved config) and the body returned by
``loopzoo.engine.training.train_and_evaluate`` (or ``baseline_records``, which adds
``seed_dependent`` and ``details``): ``status`` ("ok" | "diverged" | "failed" | "skipped"),
``reason``, ``diverged_at_step``, ``model``, ``task``, ``suite``, ``seed``, ``params``,
``budget``, ``sizes``, ``versions``, ``primary``, ``metrics``, ``lr``, ``curves``, ``cost``,
``gradient_reach``, ``feedback``, ``started``, ``finished``.
"""

from __future__ import annotations

import hashlib
import os
import sys
from datetime import datetime, timezone
from importlib import resources
from pathlib import Path
from typing import Any

from loopzoo._io import atomic_write_json, json_safe, read_json_object
from loopzoo.engine.provenance import utc_now, versions
from loopzoo.harness.errors import OutDirError
from loopzoo.harness.shipped import CONFIG_MODULE
from loopzoo.tasks._rows import KINDS as ROW_KINDS

__all__ = [
    "SCHEMA",
    "CONFIG_VERSION",
    "MANIFEST",
    "DAMAGED_DIR",
    "DamagedRecord",
    "STATUSES",
    "RECORD_KINDS",
    "KEPT_ON_RERUN",
    "BODY_FIELDS",
    "records_dir",
    "record_path",
    "make_record",
    "failed_body",
    "write_record",
    "read_record",
    "set_aside",
    "load_records",
    "is_done",
    "check_out_dir",
    "claim_out_dir",
    "suite_digest",
    "versions",
    "utc_now",
]

SCHEMA = "loopzoo.run/1"
# Bumped whenever a config key changes meaning, so old output directories are refused.
CONFIG_VERSION = 2
MANIFEST = "loopzoo-out.json"
DAMAGED_DIR = "records-damaged"
# "skipped": a classical row the data cannot support (too short for its season, constant), with
# the reason.
STATUSES = ("ok", "diverged", "failed", "skipped")
# "model": a trained topology; the others are the task's comparison rows (loopzoo.tasks._rows).
RECORD_KINDS = ("model", *ROW_KINDS)
# A rerun keeps ok and diverged records (divergence is a deterministic outcome of config and
# seed, so rerunning would only repeat it) and redoes failed ones (a failure may be transient).
KEPT_ON_RERUN = ("ok", "diverged")
BODY_FIELDS = (
    "status", "reason", "diverged_at_step", "model", "task", "suite", "seed", "params", "budget",
    "sizes", "versions", "primary", "metrics", "lr", "curves", "cost", "gradient_reach",
    "feedback", "convergence", "tuning", "reproduce", "started", "finished",
)


def records_dir(out: str | Path) -> Path:
    """``out/records``."""
    return Path(out) / "records"


def record_path(out: str | Path, run_id: str) -> Path:
    """``out/records/<run_id>.json``."""
    return records_dir(out) / f"{run_id}.json"


def make_record(
    body: dict[str, Any], *, run_id: str, kind: str, config: dict[str, Any]
) -> dict[str, Any]:
    """A full record: ``schema``, ``run_id``, ``kind`` and ``config`` added to ``body``.

    Every field of ``BODY_FIELDS`` is present (missing ones are null), NaN and infinities become
    null; ``status`` must be one of ``STATUSES``.
    """
    status = body.get("status")
    if status not in STATUSES:
        raise ValueError(
            f"record {run_id}: status {status!r} is not one of {', '.join(STATUSES)}"
        )
    if kind not in RECORD_KINDS:
        raise ValueError(f"record {run_id}: kind {kind!r} is not one of {', '.join(RECORD_KINDS)}")
    record = {field: body.get(field) for field in BODY_FIELDS}
    record.update({k: v for k, v in body.items() if k not in record})
    record.update({"schema": SCHEMA, "run_id": run_id, "kind": kind, "config": config})
    return json_safe(record)


def failed_body(cfg: dict[str, Any], reason: str, started: str) -> dict[str, Any]:
    """The body of a run that raised before producing its own: status failed with ``reason``."""
    return {
        "status": "failed",
        "reason": reason,
        "model": cfg["model"]["name"],
        "task": cfg["task"]["name"],
        "suite": cfg.get("suite"),
        "seed": cfg["seed"],
        "budget": cfg["task"].get("budget"),
        "versions": versions(),
        "metrics": {},
        "started": started,
        "finished": utc_now(),
    }


def write_record(out: str | Path, record: dict[str, Any]) -> Path:
    """Write ``record`` to ``out/records/<run_id>.json`` atomically; returns the path."""
    path = record_path(out, record["run_id"])
    atomic_write_json(path, record)
    return path


class DamagedRecord(OutDirError):
    """A record file that is not a JSON object (truncated, overwritten, not UTF-8)."""


def read_record(path: str | Path) -> dict[str, Any]:
    """Read one record, refusing files that are not records of this ``SCHEMA``.

    Raises ``DamagedRecord`` for a file that is not a JSON object at all and ``OutDirError`` for
    a record of another schema.
    """
    path = Path(path)
    try:
        record = read_json_object(path)
    except ValueError as error:
        raise DamagedRecord(f"{path}: not a readable run record ({error})") from None
    if record.get("schema") != SCHEMA:
        raise OutDirError(f"{path}: record schema {record.get('schema')!r}, expected {SCHEMA!r}")
    return record


def set_aside(path: Path) -> Path:
    """Move a damaged record to ``DIR/records-damaged/`` (kept, never deleted); its new path."""
    folder = path.parent.parent / DAMAGED_DIR
    folder.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S%fZ")
    target = folder / f"{path.stem}.{stamp}{path.suffix}"
    os.replace(path, target)
    return target


def load_records(out: str | Path) -> list[dict[str, Any]]:
    """Every record under ``out/records``, sorted by run id (temporary files are ignored)."""
    folder = records_dir(out)
    if not folder.is_dir():
        return []
    return [read_record(p) for p in sorted(folder.glob("[!.]*.json"))]


def existing_record(out: str | Path, run_id: str) -> dict[str, Any] | None:
    """The record of ``run_id`` if it exists and is readable, whatever its status.

    A damaged record (not a JSON object) is set aside with a message naming both paths and
    counts as missing, so one bad file never blocks a sweep: its run is done again.
    """
    path = record_path(out, run_id)
    if not path.exists():
        return None
    try:
        return read_record(path)
    except DamagedRecord as error:
        try:
            aside = set_aside(path)
        except FileNotFoundError:  # another job moved it first and said so
            return None
        print(f"{error}; moved to {aside} (kept) and the run is done again",
              file=sys.stderr, flush=True)
        return None


def is_done(out: str | Path, run_id: str) -> dict[str, Any] | None:
    """The existing record of ``run_id`` if a rerun keeps it (status in ``KEPT_ON_RERUN``); a
    damaged one is set aside (``existing_record``)."""
    record = existing_record(out, run_id)
    return record if record is not None and record.get("status") in KEPT_ON_RERUN else None


def suite_digest(suite: str | None) -> str | None:
    """SHA-256 (12 hex) of the shipped suite file, so an edited suite never joins old runs."""
    if suite is None:
        return None
    text = resources.files(CONFIG_MODULE).joinpath("suite", f"{suite}.yaml").read_bytes()
    return hashlib.sha256(text).hexdigest()[:12]


def _manifest_fields(suite: str | None) -> dict[str, Any]:
    return {"schema": SCHEMA, "config_version": CONFIG_VERSION, "suite": suite,
            "suite_digest": suite_digest(suite)}


def check_out_dir(out: str | Path, suite: str | None) -> dict[str, Any] | None:
    """Check, without writing, that ``out`` may take runs of ``suite``: its manifest, or None.

    Refuses (``OutDirError``) an output directory whose manifest names another record schema,
    config version, suite or suite definition (``suite_digest``), or that holds records but no
    manifest.
    """
    out = Path(out)
    wanted = _manifest_fields(suite)
    manifest_path = out / MANIFEST
    if manifest_path.exists():
        try:
            manifest = read_json_object(manifest_path)
        except ValueError as error:
            raise OutDirError(f"{manifest_path}: unreadable manifest ({error})") from None
        for key, value in wanted.items():
            if manifest.get(key) == value:
                continue
            found = f"runs with {key} {manifest.get(key)!r}, this run has {key} {value!r}"
            if key == "suite_digest":
                found = f"runs of an earlier definition of suite {suite!r} (its file changed)"
            raise OutDirError(
                f"out={out} holds {found}; records of different settings are never mixed: "
                "choose another out directory"
            )
        return manifest
    if records_dir(out).is_dir() and any(records_dir(out).glob("[!.]*.json")):
        raise OutDirError(
            f"out={out} holds records but no {MANIFEST}: it was not written by this version "
            "of loopzoo; choose another out directory"
        )
    return None


def claim_out_dir(out: str | Path, suite: str | None) -> dict[str, Any]:
    """``check_out_dir``, then write the manifest if there is none. Called only when a record is
    about to be written, so a refused config never claims a folder."""
    manifest = check_out_dir(out, suite)
    if manifest is None:
        manifest = {**_manifest_fields(suite), "created": utc_now()}
        atomic_write_json(Path(out) / MANIFEST, manifest)
    return manifest
