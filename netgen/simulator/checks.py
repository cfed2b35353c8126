"""Checks on netlists and on simulator logs that need no simulator.

* :func:`check_netlist` refuses netlists whose control blocks (also inside included files)
  run shell or system commands or load compiled code, unless the user allows it.
* :func:`diagnose` turns ngspice's log into one message and a hint.

Split from :mod:`netgen.simulator.engine` (which re-exports these names) so the engine module keeps
to the simulator itself.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

from netgen.errors import SimulationError

__all__ = ["check_netlist", "diagnose", "MAX_INCLUDE_DEPTH"]


# ---------------------------------------------------------------- netlist checks

_CONTROL_START = re.compile(r"^\s*\.(control|exec)\b", re.IGNORECASE)
_CONTROL_END = re.compile(r"^\s*\.endc\b", re.IGNORECASE)
#: control-language commands that reach the operating system, spawn programs or load code
_SHELL_COMMANDS = {"shell", "system", "exec", "aspice", "rspice", "edit", "jobs", "rusage_shell", "sh", "bash",
                   "cmd", "codemodel", "pre_codemodel", "osdi", "pre_osdi"}
#: ``.include``/``.inc`` and ``.lib`` lines (ngspice accepts the abbreviations)
_INCLUDE = re.compile(r"^\s*\.(inc\w*|lib)\s+(.*)$", re.IGNORECASE)
#: how deep nested includes are followed before the netlist is refused
MAX_INCLUDE_DEPTH = 10


def _include_target(rest: str) -> str | None:
    """The file named by the rest of an ``.include`` / ``.lib`` line (quotes removed)."""
    rest = rest.strip()
    if not rest:
        return None
    if rest[0] in "\"'":
        end = rest.find(rest[0], 1)
        return rest[1:end] if end > 0 else rest[1:]
    return rest.split()[0]


def _resolve_include(target: str, folders: list[Path]) -> Path | None:
    """The existing file ``target`` names: absolute, or relative to one of ``folders`` (first match)."""
    path = Path(os.path.expanduser(target))
    candidates = [path] if path.is_absolute() else [f / path for f in folders]
    for cand in candidates:
        try:
            if cand.is_file():
                return cand.resolve()
        except OSError:
            continue
    return None


def _scan(text: str, where: str, folders: list[Path], depth: int, seen: set) -> None:
    """Refuse shell commands in ``text``'s control blocks; follow its includes (see check_netlist)."""
    inside = False
    for number, line in enumerate(text.splitlines(), start=1):
        if _CONTROL_START.match(line):
            inside = True
            continue
        if _CONTROL_END.match(line):
            inside = False
            continue
        targets: list[str] = []
        if not inside:
            m = _INCLUDE.match(line)
            if m:
                target = _include_target(m.group(2))
                # '.lib name' inside a library file opens a section; a missing file is skipped below
                if target:
                    targets.append(target)
        else:
            for part in line.split(";"):
                cmd = part.strip()
                if not cmd or cmd.startswith(("*", "#")):
                    continue
                word = re.split(r"[\s(]", cmd, maxsplit=1)[0].lower()
                if cmd.startswith("!") or word in _SHELL_COMMANDS:
                    raise SimulationError(
                        f"{where} line {number}: the control command '{cmd[:40]}' would run a "
                        "shell/system command; remove it, or pass allow_shell=True if you trust the netlist.")
                if word == "source":  # 'source file' runs that file's control blocks too
                    target = _include_target(cmd[len("source"):])
                    if target:
                        targets.append(target)
        for target in targets:
            path = _resolve_include(target, folders)
            if path is None or path in seen:
                continue  # a missing file is ngspice's error to report; a cycle is scanned once
            if depth >= MAX_INCLUDE_DEPTH:
                raise SimulationError(
                    f"{where} line {number}: includes are nested more than {MAX_INCLUDE_DEPTH} levels deep "
                    f"('{target[:60]}'); flatten the model files.")
            seen.add(path)
            try:
                content = path.read_text(encoding="utf-8", errors="replace")
            except OSError as exc:
                raise SimulationError(f"The included file {path} cannot be read ({exc.strerror}); "
                                      "check its permissions.") from None
            _scan(content, f"Included file {path}", [path.parent] + folders, depth + 1, seen)


def check_netlist(netlist: str, *, allow_shell: bool = False, base_dir: str | Path | None = None) -> None:
    """Refuse netlists whose ``.control``/``.exec`` blocks run shell or system commands.

    The files the netlist includes (``.include``, ``.inc``, ``.lib``, and ``source`` in a
    control block) are read and checked the same way, nested ones too (up to
    ``MAX_INCLUDE_DEPTH`` levels): ngspice 39 runs ``.control`` blocks it finds in
    included files. Relative paths resolve against the including file's folder, then
    ``base_dir`` (default: the current folder), where ngspice looks for them.

    Raises
    ------
    SimulationError
        Naming the file and line, unless ``allow_shell`` is true.
    """
    if not isinstance(netlist, str) or not netlist.strip():
        raise SimulationError("The netlist is empty; render a design first.")
    if allow_shell:
        return
    folder = Path(base_dir) if base_dir is not None else Path.cwd()
    _scan(netlist, "Netlist", [folder], 0, set())


_NUM = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(meg|mil|[tgkmunpf])?", re.IGNORECASE)
_SCALE = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "mil": 25.4e-6,
          "u": 1e-6, "n": 1e-9, "p": 1e-12, "f": 1e-15}


def spice_number(token: str) -> float:
    m = _NUM.match(token.strip())
    if not m:
        raise ValueError(token)
    return float(m.group(1)) * _SCALE.get((m.group(2) or "").lower(), 1.0)


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
