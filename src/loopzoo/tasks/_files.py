"""The user's input files: read once with clear errors, identified by their content's SHA-256."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

__all__ = ["check_input_file", "fingerprint", "read_input_file"]

def check_input_file(path: str | os.PathLike[str], what: str) -> Path:
    """``path`` as a Path if it names a readable regular file; a ``ValueError`` saying why not.

    ``what`` names the file in the message ("CSV file", "text file"). A missing file raises
    ``FileNotFoundError`` (a ``ValueError`` would hide it among option errors).
    """
    file = Path(path)
    if not file.exists():
        where = "" if file.is_absolute() else f" (relative to {Path.cwd()})"
        raise FileNotFoundError(f"{what} {str(file)!r} does not exist{where}")
    if not file.is_file():
        raise ValueError(f"{what} path {str(file)!r} is not a file")
    if not os.access(file, os.R_OK):
        raise ValueError(f"{what} {str(file)!r} cannot be read (permission denied)")
    return file


def read_input_file(path: str | os.PathLike[str], what: str) -> tuple[bytes, dict[str, object]]:
    """The file's bytes and the identity ``{"path", "sha256", "bytes"}`` of exactly those."""
    file = check_input_file(path, what)
    try:
        data = file.read_bytes()
    except OSError as error:
        raise ValueError(f"{what} {str(file)!r} cannot be read: {error.strerror}") from None
    return data, {"path": str(path), "sha256": hashlib.sha256(data).hexdigest(),
                  "bytes": len(data)}


def fingerprint(path: str | os.PathLike[str], what: str = "input file") -> dict[str, object]:
    """``{"path", "sha256", "bytes"}`` of the file as it is now.

    Hashed on every call: a cache keyed on size and modification time would miss a rewrite of
    the same size within the file system's timestamp resolution.
    """
    file = check_input_file(path, what)
    digest, size = hashlib.sha256(), 0
    try:
        with file.open("rb") as stream:
            for block in iter(lambda: stream.read(1 << 20), b""):
                digest.update(block)
                size += len(block)
    except OSError as error:
        raise ValueError(f"{what} {str(file)!r} cannot be read: {error.strerror}") from None
    return {"path": str(path), "sha256": digest.hexdigest(), "bytes": size}
