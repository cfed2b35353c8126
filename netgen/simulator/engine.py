"""The simulation engine: the only module that talks to ngspice (and imports PySpice).

Two paths, same answers:

* ``backend="shared"``: libngspice through PySpice's ``NgSpiceShared``, run inside
  one long-lived **worker process** (``spawn`` context). A simulator crash kills
  only the worker, a hang is ended by killing it; both raise
  :class:`~netgen.errors.SimulationError` and the next call starts a fresh
  worker. Loading libngspice happens once per worker; between runs the worker
  sends ``destroy all`` and ``remcirc``.
* ``backend="batch"``: the ``ngspice`` executable in pipe mode (``ngspice -p``),
  driven by commands on its standard input; results come back through raw
  files read by :mod:`netgen.simulator.rawfile`.

Vector names (both paths, lower case, as ngspice's shared API names them):
node voltages by the bare node name (``drain``, ``vdd``), branch currents as
``<element>#branch`` (``vdd#branch``), the scale as ``time`` / ``frequency``.
The returned dict also answers to the raw-file spellings ``v(drain)`` and
``i(vdd)`` (aliases, not extra keys).

PySpice's global state, its locale change, its unit-carrying arrays and its
builtin ``NameError`` stay inside the worker; callers get plain float64 /
complex128 numpy arrays and :class:`SimulationError` with ngspice's own
messages in ``.log`` and a suggestion in ``.hint``.
"""

from __future__ import annotations

import ctypes.util
import os
import re
import subprocess
from typing import Callable

import numpy as np

from netgen.errors import SimulationError

from . import batch, shared
from .checks import MAX_INCLUDE_DEPTH, check_netlist, diagnose  # noqa: F401  (part of the engine's face)
from .common import (
    EXECUTABLE_ENV,
    LIBRARY_ENV,
    MAX_COMMAND_CHARS,
    Resume,
    Vectors,
    executable_path,
)
from .shared import shutdown, worker_pid

__all__ = [
    "Vectors",
    "Resume",
    "run_transient",
    "run_ac",
    "run_op",
    "check_netlist",
    "find_ngspice",
    "doctor_report",
    "diagnose",
    "shutdown",
    "worker_pid",
    "MAX_COMMAND_CHARS",
    "EXECUTABLE_ENV",
]

# ---------------------------------------------------------------- public API

def _dispatch(kind, netlist, opts, backend, timeout_s, progress, allow_shell):
    check_netlist(netlist, allow_shell=allow_shell)
    if backend == "shared":
        return shared.run_shared(kind, netlist, opts, timeout_s, progress)
    if backend == "batch":
        return batch.run_batch(kind, netlist, opts, timeout_s, progress)
    raise SimulationError(f"Unknown simulator backend '{backend}'; use 'shared' or 'batch' (sim.backend).")


def _wrap(result: dict) -> Vectors:
    out = Vectors(result["vectors"])
    out.log = result.get("log", "")
    out.stopped_early = bool(result.get("stopped", False))
    out.checker = result.get("checker")
    return out


def run_transient(netlist: str, *, save: list[str] | None = None, backend: str = "shared",
                  timeout_s: float = 600.0, stop_check: Callable | None = None,
                  chunk_s: float | None = None, progress: Callable[[str], None] | None = None,
                  keep_s: float | None = None, allow_shell: bool = False) -> Vectors:
    """Run the netlist's ``.tran`` analysis.

    Parameters
    ----------
    netlist : str
        ngspice netlist with a ``.tran <step> <stop> ...`` line.
    save : list of str, optional
        Vectors to keep (``drain``, ``vdd#branch``); all by default. ``time`` is always kept.
    backend : {"shared", "batch"}
    timeout_s : float
        Wall-clock limit, s; on expiry the run is killed and SimulationError raised.
    stop_check : callable, optional
        ``stop_check(time_s, vectors) -> bool`` (or ``(bool, message)`` or
        ``(bool, message, Resume)``), picklable; called after each chunk with the points
        added since the previous call (the previous chunk's last point included). True ends
        the run. A :class:`Resume` sends its ``alter`` commands to the paused run before it
        resumes and may set the next stop time. With the shared library it runs
        inside the worker process and keeps its state for the run; the object as it was
        at the end comes back as ``result.checker``.
    chunk_s : float, optional
        Simulated time per chunk, s (stop/resume in ngspice). Without it the run is one piece.
    progress : callable, optional
        Receives progress messages (strings) in the caller's process.
    keep_s : float, optional
        Return only the last ``keep_s`` seconds of the run (plus one point before).
    allow_shell : bool
        Allow ``.control`` commands that reach the shell (refused otherwise).

    Returns
    -------
    Vectors
        ``time`` and the saved vectors as float64 arrays (see the module docstring for names).

    Raises
    ------
    SimulationError
        ngspice failed (message, ``log`` and ``hint``), crashed, or timed out.
    """
    opts = {"save": list(save) if save else None, "stop_check": stop_check,
            "chunk_s": float(chunk_s) if chunk_s else None, "keep_s": keep_s}
    return _wrap(_dispatch("tran", netlist, opts, backend, timeout_s, progress, allow_shell))


def run_ac(netlist: str, *, backend: str = "shared", timeout_s: float = 60.0,
           allow_shell: bool = False) -> tuple[np.ndarray, Vectors]:
    """Run the netlist's ``.ac`` analysis.

    Returns
    -------
    freq_hz : ndarray of float64
    vectors : Vectors
        complex128 arrays by name (``drain`` is v(drain), ``vdd#branch`` ...).
    """
    result = _wrap(_dispatch("ac", netlist, {}, backend, timeout_s, None, allow_shell))
    freq = np.asarray(result.pop("frequency"), dtype=np.float64)
    for k in list(result):
        result[k] = np.asarray(result[k], dtype=np.complex128)
    return freq, result


def run_op(netlist: str, *, backend: str = "shared", timeout_s: float = 60.0,
           allow_shell: bool = False) -> Vectors:
    """DC operating point (``op``): node voltages (V) and branch currents (A) as floats."""
    return _wrap(_dispatch("op", netlist, {}, backend, timeout_s, None, allow_shell))



# ---------------------------------------------------------------- doctor (engine.find_ngspice / doctor_report)

_TRIVIAL = """pashape doctor check
V1 in 0 DC 10
R1 in out 1k
R2 out 0 1k
.end
"""


def _library_path() -> str | None:
    env = os.environ.get(LIBRARY_ENV)
    if env:
        return env
    return ctypes.util.find_library("ngspice")


def find_ngspice() -> dict:
    """Where ngspice is: ``{"executable", "version", "library", "library_env"}`` (None when absent)."""
    exe = executable_path()
    version = None
    if exe:
        try:
            out = subprocess.run([exe, "--version"], capture_output=True, text=True, timeout=20).stdout
            m = re.search(r"ngspice-?\s*([0-9][0-9.]*\S*)", out)
            version = m.group(1) if m else out.strip()[:60] or None
        except (OSError, subprocess.TimeoutExpired):
            version = None
    return {"executable": exe, "version": version, "library": _library_path(),
            "library_env": os.environ.get(LIBRARY_ENV)}


def doctor_report(timeout_s: float = 60.0) -> dict:
    """Check both simulator paths with a trivial circuit (a 10 V divider: out = 5 V).

    Returns
    -------
    dict
        ``executable``, ``version``, ``library`` (paths or None), ``shared_ok``,
        ``batch_ok`` (bool), ``shared_error`` / ``batch_error`` (text or None),
        ``fixes`` (list of sentences; empty when all is well), ``checks`` (one dict
        per path: ``what``, ``ok``, ``detail``, ``fix``; what ``pashape doctor`` prints).
    """
    report = find_ngspice()
    fixes: list[str] = []
    checks: list[dict] = []
    for backend in ("shared", "batch"):
        ok, err = False, None
        try:
            res = run_op(_TRIVIAL, backend=backend, timeout_s=timeout_s)
            ok = abs(res["out"] - 5.0) < 1e-6
            if not ok:
                err = f"the test divider gave {res['out']} V instead of 5 V"
        except SimulationError as exc:
            err = str(exc)
        report[f"{backend}_ok"] = ok
        report[f"{backend}_error"] = err
    fix_shared = (f"Shared library path: install libngspice (Debian: libngspice0-dev) or set {LIBRARY_ENV} "
                  "to the full path of libngspice.so; meanwhile use sim.backend = \"batch\".")
    fix_batch = (f"Executable path: install ngspice (Debian: apt install ngspice) or set {EXECUTABLE_ENV} "
                 "to the ngspice executable.")
    for backend, what, where, fix in (("shared", "shared library (sim.backend = \"shared\")", report["library"],
                                       fix_shared),
                                      ("batch", "executable (sim.backend = \"batch\")", report["executable"],
                                       fix_batch)):
        ok = report[f"{backend}_ok"]
        if not ok:
            fixes.append(fix)
        detail = (f"{where or 'found'}; 10 V divider gives 5 V" + (f" (ngspice {report['version']})"
                                                                     if backend == "batch" and report["version"] else "")
                  if ok else report[f"{backend}_error"] or "not found")
        checks.append({"what": what, "ok": ok, "detail": detail, "fix": None if ok else fix})
    report["fixes"] = fixes
    report["checks"] = checks
    return report
