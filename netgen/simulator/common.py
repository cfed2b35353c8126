"""What both simulator paths share: limits, vector names, the stop/resume protocol.

The shared-library path (:mod:`netgen.simulator.shared`) and the executable path
(:mod:`netgen.simulator.batch`) both import from here; neither imports the other.
"""

from __future__ import annotations

import os
import re
import shutil
import stat
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

from netgen.errors import SimulationError

__all__ = ["MAX_COMMAND_CHARS", "EXECUTABLE_ENV", "LIBRARY_ENV", "SENTINEL", "canonical_name", "Vectors",
           "save_spelling", "Resume", "check_verdict", "next_stop", "executable_path", "private_env",
           "session_folder_prefix", "remove_stale_folders", "remove_stale_folders_once", "STALE_AGE_S"]

#: ngspice's shared API rejects longer command lines (PySpice enforces the same limit).
MAX_COMMAND_CHARS = 1023
#: Environment variable naming the ngspice executable when it is not on PATH.
EXECUTABLE_ENV = "PASHAPE_NGSPICE"
#: The same variable under the name before the command was renamed (still read).
OLD_EXECUTABLE_ENV = "NETGEN_NGSPICE"
#: PySpice's own variable for a non-standard libngspice (a path or a pattern with '{}').
LIBRARY_ENV = "NGSPICE_LIBRARY_PATH"

SENTINEL = "@@NETGEN_DONE@@"


# ---------------------------------------------------------------- names

def canonical_name(name: str) -> str:
    """ngspice vector name in the engine's spelling: ``v(x)`` -> ``x``, ``i(x)`` -> ``x#branch``."""
    low = name.strip().lower()
    m = re.fullmatch(r"v\(([^(),]+)\)", low)
    if m:
        return m.group(1)
    m = re.fullmatch(r"i\(([^(),]+)\)", low)
    if m:
        return m.group(1) + "#branch"
    return low


class Vectors(dict):
    """Result vectors by name (see the module docstring for the spelling).

    Lookups also accept ``v(node)`` and ``i(element)``. Attributes:
    ``stopped_early`` (a ``stop_check`` ended the run), ``checker`` (the
    ``stop_check`` object as it was at the end of the run, with whatever state
    it kept), ``log`` (ngspice's messages).
    """

    stopped_early: bool = False
    checker: object = None
    log: str = ""

    def __missing__(self, key):
        alt = canonical_name(key)
        if alt != key and dict.__contains__(self, alt):
            return dict.__getitem__(self, alt)
        raise KeyError(key)

    def __contains__(self, key):
        return dict.__contains__(self, key) or dict.__contains__(self, canonical_name(key))


def save_spelling(name: str) -> str:
    low = name.strip().lower()
    if low.endswith("#branch"):
        return f"i({low[:-7]})"
    if low.startswith(("v(", "i(", "@")) or low == "time":
        return low
    return f"v({low})"


@dataclass(frozen=True)
class Resume:
    """What a ``stop_check`` may ask for before the paused run resumes (third item of its verdict).

    Attributes
    ----------
    commands : tuple of str
        ngspice commands sent before ``resume``, e.g. ``("alter i_aux_feed dc = 0.0123",)``;
        only ``alter`` and ``altermod`` are accepted, each at most MAX_COMMAND_CHARS long.
    stop_at_s : float or None
        Simulated time of the next stop, s (default: one ``chunk_s`` after the previous stop).
    """

    commands: tuple = ()
    stop_at_s: float | None = None


def check_verdict(check, t_end: float, part) -> tuple[bool, str | None, Resume | None]:
    """Call ``check(t_end, part)``: (stop, message, Resume or None) from a bool, (bool, msg) or (bool, msg, Resume)."""
    out = check(t_end, part)
    message, action = None, None
    if isinstance(out, tuple):
        out, message, action = (tuple(out) + (None, None))[:3]
    if action is not None:
        for c in action.commands:
            word = c.strip().split(None, 1)[0].lower() if c.strip() else ""
            if word not in ("alter", "altermod") or len(c) > MAX_COMMAND_CHARS or "\n" in c or ";" in c:
                raise SimulationError(f"The stop_check asked for the command '{c[:60]}'; only single 'alter' / "
                                      f"'altermod' commands up to {MAX_COMMAND_CHARS} characters are sent.")
    return bool(out), message, action


def next_stop(t_next: float, t_end: float, chunk: float, action: Resume | None) -> float:
    """Time of the next stop: the stop_check's ``stop_at_s`` if later than now, else one chunk on."""
    if action is not None and action.stop_at_s is not None and action.stop_at_s > t_end:
        return float(action.stop_at_s)
    return max(t_next + chunk, t_end + 1e-3 * chunk)



def executable_path() -> str | None:
    env = os.environ.get(EXECUTABLE_ENV) or os.environ.get(OLD_EXECUTABLE_ENV)
    if env:
        return env if Path(env).exists() else shutil.which(env)
    return shutil.which("ngspice")


def private_env(folder: str) -> dict:
    """The environment ngspice is started with: ours, with HOME set to ``folder``.

    ngspice reads ``.spiceinit`` from the working folder, else from HOME (measured with ngspice
    39, docs/reliability.md); both are ``folder``, a fresh private temporary folder, so no init
    file a design folder or home folder holds is run.
    """
    env = dict(os.environ)
    env["HOME"] = folder
    env.pop("NGSPICE_INPUT_DIR", None)  # a folder ngspice searches for sourced files
    return env


# ---------------------------------------------------------------- session folders left behind

#: a simulator session's private folder: ``pashape-ng-`` (the executable's) or ``pashape-ngw-``
#: (libngspice's worker), the id of the process that made it, ``-`` and random letters
_FOLDER = re.compile(r"^pashape-ngw?-(\d+)-")
#: a folder whose process has gone and that has not changed for this long is removed, s (a process
#: killed outright, SIGKILL, cannot remove its own; the age keeps a folder of a live process that
#: this one cannot see, e.g. in another PID namespace sharing the folder, from being taken)
STALE_AGE_S = 600.0
_SWEPT: set[str] = set()  # temporary roots already swept by this process


def session_folder_prefix(kind: str) -> str:
    """Prefix of a new session folder of ``kind`` ``ng`` or ``ngw``, with this process's id."""
    return f"pashape-{kind}-{os.getpid()}-"


def remove_stale_folders_once() -> None:
    """:func:`remove_stale_folders` of the temporary folder, the first time this process asks."""
    root = tempfile.gettempdir()
    if root not in _SWEPT:
        _SWEPT.add(root)
        remove_stale_folders(root)


def remove_stale_folders(root: str | None = None, now: float | None = None) -> list[str]:
    """Remove the session folders under ``root`` (default: the temporary folder) left by processes
    that have gone: named by a process id that no longer exists, owned by this user, a real
    folder (not a link), unchanged for :data:`STALE_AGE_S`. Returns the names removed. POSIX only
    (elsewhere the process check would signal the process; nothing is removed)."""
    if os.name != "posix":
        return []
    root = root or tempfile.gettempdir()
    now = time.time() if now is None else now
    removed = []
    try:
        names = os.listdir(root)
    except OSError:
        return removed
    for name in names:
        m = _FOLDER.match(name)
        if not m or int(m.group(1)) == os.getpid():
            continue
        path = os.path.join(root, name)
        try:
            st = os.lstat(path)
        except OSError:
            continue
        if not stat.S_ISDIR(st.st_mode) or st.st_uid != os.getuid() or now - st.st_mtime < STALE_AGE_S:
            continue
        try:
            os.kill(int(m.group(1)), 0)
            continue  # the process exists (or is another user's): its folder stays
        except ProcessLookupError:
            pass
        except (PermissionError, OverflowError, OSError):
            continue
        shutil.rmtree(path, ignore_errors=True)
        removed.append(name)
    return removed
