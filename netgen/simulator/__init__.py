"""The simulator: netlist text in, plain float64 vectors out. The only stage that talks to ngspice.

Two paths with one interface: the ngspice shared library through PySpice in a worker process
(``shared``; the only module importing PySpice) and the ngspice executable in pipe mode
(``batch``); both check the netlist first (``checks``: control blocks, includes) and turn
ngspice's failures into :class:`netgen.errors.SimulationError` with the simulator's words.

Modules: ``engine`` (the public calls and the choice of path), ``shared``, ``batch``,
``common`` (what both paths share), ``checks``, ``rawfile`` (ngspice raw files).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "Resume": "common",
    "Vectors": "common",
    "check_netlist": "checks",
    "doctor_report": "engine",
    "find_ngspice": "engine",
    "run_ac": "engine",
    "run_op": "engine",
    "run_transient": "engine",
    "shutdown": "engine",
    "worker_pid": "engine",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
