"""The simulator: netlist text in, plain float64 vectors out. The only stage that talks to ngspice.

Two paths with one interface: the ngspice shared library through PySpice in a worker process
(``shared``; the only module importing PySpice) and the ngspice executable in pipe mode
(``batch``); both check the netlist first (``checks``: control blocks, includes) and turn
ngspice's failures into :class:`netgen.errors.SimulationError` with the simulator's words.

Modules: ``engine`` (the public calls and the choice of path), ``shared``, ``batch``,
``common`` (what both paths share), ``checks``, ``rawfile`` (ngspice raw files).
"""

from importlib import import_module

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


def __getattr__(name: str):
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return list(__all__)
