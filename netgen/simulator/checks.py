"""Checks on netlists and on simulator logs that need no simulator.

* :func:`check_netlist` refuses netlists that could make ngspice run a command (any control
  block, ``*#`` line or backquote) or read a file it should not (see netgen/netlist/safety.py).
* :func:`diagnose` turns ngspice's log into one message and a hint.

Split from :mod:`netgen.simulator.engine` (which re-exports these names) so the engine module keeps
to the simulator itself.
"""

from __future__ import annotations

import re
from pathlib import Path

from netgen.errors import SimulationError
from netgen.netlist import check_netlist_text

__all__ = ["check_netlist", "diagnose", "MAX_INCLUDE_DEPTH"]


# ---------------------------------------------------------------- netlist checks

#: how deep includes go: the netlist may include model files, a model file includes nothing
MAX_INCLUDE_DEPTH = 1


def check_netlist(netlist: str, *, allow_shell: bool = False, base_dir: str | Path | None = None) -> None:
    """Refuse a netlist that could make ngspice run a command or read a file it should not.

    The rules are :func:`netgen.netlist.check_netlist_text`'s (docs/reliability.md): no control
    block or ``*#`` line at all (pashape sends every simulator command itself), no backquote,
    only known dot cards; included files named by absolute paths, regular and non-empty,
    holding only ``.model`` / ``.subckt`` / ``.ends`` / ``.param`` and element cards (no
    nested include). With ``base_dir``, included files must lie inside that folder after
    symbolic links are resolved (the renderer applies the design folder the same way).

    Raises
    ------
    SimulationError
        Naming the file and line, unless ``allow_shell`` is true (the library caller's explicit
        choice; no file or command-line option can set it).
    """
    if not isinstance(netlist, str) or not netlist.strip():
        raise SimulationError("The netlist is empty; render a design first.")
    if allow_shell:
        return
    roots = [Path(base_dir)] if base_dir is not None else None
    check_netlist_text(netlist, "Netlist", SimulationError, roots)


def spice_number(token: str) -> float:
    """A SPICE value with its scale suffix as a float (the one reader: ``netgen.netlist.parse_spice_number``)."""
    from netgen.netlist import parse_spice_number

    return parse_spice_number(token)


def tran_stop(netlist: str) -> float:
    for line in netlist.splitlines():
        parts = line.split()
        if parts and parts[0].lower() == ".tran":
            try:
                return spice_number(parts[2])
            except (IndexError, ValueError):
                break
    raise SimulationError("The netlist has no readable '.tran <step> <stop>' line; a transient run needs one.")


# ---------------------------------------------------------------- diagnosis

_HINT_SINGULAR = ("a floating node (add a path to ground) or a loop of voltage sources/inductors "
                  "(add a small series resistance)")
_HINT_CONVERGENCE = ("the operating point did not converge (gmin and source stepping failed): add a '.nodeset' "
                     "near the expected solution, try '.options gmin=1e-10 itl1=500', look for a floating node "
                     "or a circuit with no DC solution, and check for unrealistic component values")
_HINT_TIMESTEP = ("the time step collapsed during the run: with transmission lines set '.options minbreak' to "
                  "about 0.01*TMAX, reduce TMAX (sim.points_per_cycle), and check for floating nodes")
_HINT_MISSING = "the netlist refers to a model, subcircuit or node that is not defined; check the template and includes"

#: (pattern of the key line, hint), most specific cause first: a singular matrix makes gmin and
#: source stepping fail, and a failed operating point ends in 'timestep too small' too
_CAUSES = [
    (re.compile(r"singular matrix", re.I), _HINT_SINGULAR),
    (re.compile(r"gmin stepping failed|source stepping failed|dc solution failed|transient op failed|"
                r"initial timepoint|no convergence in dc|op:\s+timestep too small", re.I), _HINT_CONVERGENCE),
    (re.compile(r"timestep too small", re.I), _HINT_TIMESTEP),
    (re.compile(r"iteration limit|convergence problem|no convergence", re.I), _HINT_CONVERGENCE),
    (re.compile(r"unknown (model|subckt|device|parameter)|could not find|unable to find|no such|undefined", re.I),
     _HINT_MISSING),
]
_IGNORE = ("no graphics interface", "run simulation interrupted", "pause requested", "x-server is running",
           "compiled properly")
#: the line quoted in the message, in order of preference: an error, a collapsed step, ngspice's
#: closing 'simulation(s) aborted'
_KEY_LINES = [re.compile(r"error", re.I), re.compile(r"timestep too small|solution failed", re.I),
              re.compile(r"aborted", re.I)]


def _clean(line: str) -> str:
    return re.sub(r"^(stdout|stderr)\s+", "", line.strip())


def diagnose(log: str) -> tuple[str, str]:
    """ngspice's key message in ``log`` and a hint for it (``("", "")`` if nothing is found).

    The message is the first error line (else the first 'timestep too small' line, else
    the 'aborted' line), with a note that gmin/source stepping failed and the first
    'singular matrix' note, which ngspice prints as warnings, appended. The hint follows the most specific cause found: singular matrix, then
    a failed operating point (gmin/source stepping), then a collapsed time step during
    the run, then other non-convergence, then undefined names.
    """
    lines = [_clean(ln) for ln in log.splitlines() if ln.strip()]
    lines = [ln for ln in lines if not any(s in ln.lower() for s in _IGNORE)]
    error = ""
    for pattern in _KEY_LINES:
        error = next((ln for ln in lines if pattern.search(ln)), "")
        if error:
            break
    stepping = any(re.search(r"stepping failed", ln, re.I) for ln in lines)
    if stepping and "stepping failed" not in error.lower():
        error = f"{error} (gmin and source stepping failed)" if error else "gmin and source stepping failed"
    singular = next((ln for ln in lines if "singular matrix" in ln.lower()), "")
    if singular:
        singular = singular[singular.lower().index("singular matrix"):]
        error = f"{error} ({singular})" if error else singular
    hint = ""
    for pattern, text in _CAUSES:
        if any(pattern.search(ln) for ln in lines):
            hint = text
            break
    if error and not hint:
        hint = "see ngspice's messages in the log; run 'pashape doctor' if the installation is in doubt"
    return error, hint


def looks_failed(log: str) -> bool:
    for line in log.splitlines():
        low = line.lower()
        if "warning" in low or any(s in low for s in _IGNORE):
            continue
        if "error" in low or "aborted" in low or "timestep too small" in low:
            return True
    return False


def simulation_failure(what: str, log: str, default_hint: str = "") -> SimulationError:
    line, hint = diagnose(log)
    msg = f"ngspice {what} failed" + (f": {line}." if line else ".")
    return SimulationError(msg, log=log, hint=hint or default_hint)


def short_run(t_end: float | None, tstop: float, log: str) -> SimulationError:
    """A transient run that ended before its stop time without being asked to (never a short result)."""
    line, hint = diagnose(log)
    where = "before its first time point" if t_end is None else f"at t = {t_end:.6g} s"
    msg = f"ngspice transient analysis stopped {where}, before the requested {tstop:.6g} s"
    msg += f": {line}." if line else " without an error message."
    return SimulationError(msg, log=log, hint=hint or _HINT_TIMESTEP)
