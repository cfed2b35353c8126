"""Atomic file writes: a file is either complete or absent, never half-written.

Files get the permissions an ordinary ``open()`` would give (0666 less the user's umask), not
the 0600 of the temporary file they are written through. A full disk or any other write error
removes the temporary file and raises :class:`~netgen.errors.OutputError` naming the target.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import OutputError

__all__ = ["atomic_write_bytes", "atomic_write_text", "current_umask", "write_chunks"]


def current_umask() -> int:
    """The process umask (read from /proc on Linux, else set and restored at once)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def write_chunks(fh, data: bytes, chunk: int = 1 << 20) -> None:
    """``fh.write(data)`` in pieces (the one place output bytes reach the disk; tests patch it)."""
    view = memoryview(data)
    for start in range(0, len(view), chunk):
        fh.write(view[start:start + chunk])


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and ``os.replace``.

    Raises OutputError (naming the path) when the folder is missing or not writable, or the
    disk is full; the temporary file is removed and ``path`` is left as it was.
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
            os.fchmod(fh.fileno(), 0o666 & ~current_umask())  # mkstemp makes 0600; outputs are ordinary files
            write_chunks(fh, data)
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
