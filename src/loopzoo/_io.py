"""Atomic writes (a reader never sees a half-written result file); JSON objects read back."""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

__all__ = ["atomic_write_bytes", "atomic_write_text", "atomic_write_json", "check_folder",
           "json_safe", "read_json_object"]


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> None:
    """Write ``data`` to ``path`` via a temporary file in the same folder, fsync, then rename."""
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        # mkstemp creates the file owner-only (0600); give it the mode a plain open() would.
        os.chmod(tmp, 0o666 & ~_current_umask())
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_text(path: str | os.PathLike[str], text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    atomic_write_bytes(path, text.encode("utf-8"))


def json_safe(value: Any) -> Any:
    """``value`` with NaN and infinities replaced by None, recursively (JSON has no such numbers).

    >>> json_safe({"loss": float("nan"), "steps": [1.0, float("inf")]})
    {'loss': None, 'steps': [1.0, None]}
    """
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    return value


def atomic_write_json(path: str | os.PathLike[str], obj: Any) -> None:
    """Write ``obj`` as indented, key-sorted JSON to ``path`` atomically."""
    atomic_write_text(path, json.dumps(obj, indent=2, sort_keys=True, allow_nan=False) + "\n")


def check_folder(path: str | os.PathLike[str], name: str) -> None:
    """Refuse (``ValueError``, naming ``name``) a ``path`` that is not a folder this process can
    write in or make: a file, a path under a file, or a folder without write permission."""
    folder = Path(path)
    existing = next(p for p in (folder, *folder.parents) if p.exists() or p == p.parent)
    if existing == folder and not folder.is_dir():
        raise ValueError(f"{name} {str(folder)!r} is a file; it must name a folder (made if "
                         "missing): choose another path")
    if not existing.is_dir():
        raise ValueError(f"{name} {str(folder)!r}: {str(existing)!r} is a file, so no folder can "
                         "be made under it; choose another path")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise ValueError(f"{name} {str(folder)!r}: {str(existing)!r} is not writable by this "
                         "user; choose a writable folder")


def read_json_object(path: str | os.PathLike[str]) -> dict[str, Any]:
    """The JSON object in the UTF-8 file ``path``; ValueError saying why it is not one
    (unreadable, not UTF-8, not JSON, or JSON of another type)."""
    try:
        value = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        raise ValueError(str(error)) from None
    if not isinstance(value, dict):
        raise ValueError(f"a JSON {type(value).__name__}, not an object")
    return value
