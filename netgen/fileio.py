"""Atomic file writes: a file is either complete or absent, never half-written."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import OutputError

__all__ = ["atomic_write_text", "atomic_write_bytes"]


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and ``os.replace``.

    Raises OutputError (naming the path) when the folder is missing or not writable.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise OutputError(f"{path}: is a folder; give a file name.")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except PermissionError:
        raise OutputError(f"{path}: cannot write there (permission denied); choose another location.") from None
    except OSError as exc:
        raise OutputError(f"{path}: cannot write the file ({exc.strerror}); choose another location.") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise OutputError(f"{path}: cannot write the file ({exc.strerror}); choose another location.") from None
    return path


def atomic_write_text(path: str | Path, text: str) -> Path:
    """UTF-8 text version of :func:`atomic_write_bytes`."""
    return atomic_write_bytes(path, text.encode("utf-8"))
