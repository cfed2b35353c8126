"""Errors a user can cause, each with the exit code the CLI uses.

Library code raises these and never prints or exits; ``netgen.cli.root`` turns them
into one ``Error: ...`` line on stderr and the exit code below.
"""

from __future__ import annotations

__all__ = [
    "NOT_SETTLED_EXIT_CODE",
    "NetgenError",
    "DesignError",
    "SizingError",
    "RenderError",
    "SimulationError",
    "SimulatorNotFoundError",
    "SimulatorCrashError",
    "OutputError",
]


#: exit code of ``pashape run`` / ``pashape demo`` when the run finished but did not reach periodic
#: steady state (its outputs are written, marked provisional); 2 stays for user errors
NOT_SETTLED_EXIT_CODE = 3


class NetgenError(Exception):
    """Base of every error a user can cause. ``exit_code`` is what the CLI returns."""

    exit_code = 2


class DesignError(NetgenError, ValueError):
    """A design file (or a value in it) is missing, unreadable or invalid.

    The message names the file or the dotted key path (``design.f0``) and what to do.
    """


class SizingError(NetgenError, ValueError):
    """The specification cannot be realised (e.g. device Cout larger than the class-E shunt C)."""


class RenderError(NetgenError, ValueError):
    """A template is missing, unsafe, or refers to something the design does not define."""


class SimulationError(NetgenError, RuntimeError):
    """ngspice failed, crashed or timed out.

    ``log`` holds ngspice's own messages; ``hint`` a suggestion for the user.
    """

    def __init__(self, message: str, log: str = "", hint: str = ""):
        super().__init__(message)
        self.log = log
        self.hint = hint

    def __str__(self) -> str:  # one readable line, the simulator's words attached
        text = super().__str__()
        if self.hint:
            text += f" Hint: {self.hint}"
        return text


class SimulatorNotFoundError(SimulationError):
    """Neither libngspice nor the ngspice executable could be found."""


class SimulatorCrashError(SimulationError):
    """The process running ngspice died during a run (a crash, or killed by someone or something).

    The cause may be the machine (out of memory, a kill) rather than the design, so a sweep
    tries such a point again before it counts it as failed (docs/sweeps.md).
    """


class OutputError(NetgenError, OSError):
    """An output folder or file cannot be written."""
