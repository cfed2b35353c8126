"""Simulator faults end as SimulationError with ngspice's own words and a hint, never a hang,
and the next simulation works.

Protections covered (each test fails if its protection is removed):
* error detection in netgen.simulator.engine (ngspice's failure lines -> SimulationError, never a
  silently truncated result),
* ``diagnose`` (the simulator's message kept in the error, a hint matching the failure),
* the wall-clock limit ``timeout_s`` (the run is killed, not waited for),
* the worker process (a dead libngspice ends one call, not the caller; a fresh worker
  is started for the next call).

The circuits are tiny; every run is well under a second except the deliberate time-outs.
"""

from __future__ import annotations

import os
import signal
import threading

import numpy as np
import pytest

from netgen.simulator import engine
from netgen.errors import SimulationError

pytestmark = pytest.mark.ngspice

BACKENDS = ["shared", "batch"]

# Resistive divider, checked against Ohm's law: v(b) = 10 V * 1k / (1k + 1k) = 5 V.
DIVIDER = """recovery check divider
V1 a 0 DC 10
R1 a b 1k
R2 b 0 1k
.end
"""

# RC step response, checked against v(t) = 1 - exp(-t/RC) (first-order RC circuit, any
# circuits textbook); RC = 1 ns.
RC_STEP = """recovery check rc
V1 a 0 DC 1
R1 a b 1k
C1 b 0 1p IC=0
.tran 10p 3n 0 10p uic
.end
"""

# A capacitor charged by a current that grows with the square of its voltage:
# C dv/dt = k v^2 has the solution v(t) = v0 / (1 - k v0 t / C), which reaches infinity at
# t* = C / (k v0) = 1e-12 / (1e-3 * 1) = 1 ns (separable ODE, any calculus textbook). No solution
# exists past t*, so the step collapses mid-run. Measured with ngspice 39.3 (both backends):
# "Timestep too small; time = 1.00005e-09". (The switch circuit first used here, a 1 pF
# capacitor shorted through 1 micro-ohm by a hysteretic S switch, ran to the end without error
# on this ngspice 39 build, so it did not exercise the protection.)
TIMESTEP_TOO_SMALL = """timestep collapse
C1 x 0 1p IC=1
B1 0 x I = 1e-3*v(x)*v(x)
R1 x 0 1meg
.tran 1p 10n uic
.end
"""

# Two ideal voltage sources in parallel: the MNA matrix is singular whatever gmin does.
# (A node floating among capacitors alone is rescued by ngspice's gmin stepping, so it is not
# a reliable singular case in ngspice 39; measured.)
SINGULAR = """singular loop
V1 a 0 DC 1
V2 a 0 DC 2
R1 a 0 1k
.tran 1n 10n
.end
"""

# A current source that turns off above 1 V into 1 ohm: no DC solution exists
# (v > 1 gives i = 0 hence v = 0; v <= 1 gives i = 2 A hence v = 2 V). ngspice 39 reports
# "gmin stepping failed" and "source stepping failed".
NO_SOLUTION = """no dc solution
B1 0 b I = v(b) > 1 ? 0 : 2
R1 b 0 1
.end
"""

# 1 ms of a 1 GHz source at a 1 fs step: hours of work; only the time limit ends it.
ENDLESS = """endless
V1 a 0 SIN(0 1 1e9)
R1 a b 1k
C1 b 0 1p
.tran 1f 1m 0 1f
.end
"""


def assert_next_run_works(backend: str) -> None:
    """The engine still works after a fault (same backend, fresh worker if needed)."""
    vec = engine.run_op(DIVIDER, backend=backend, timeout_s=60)
    assert float(vec["b"]) == pytest.approx(5.0, rel=1e-9)  # Ohm's law
    tran = engine.run_transient(RC_STEP, backend=backend, timeout_s=60)
    t = np.asarray(tran["time"])
    v = np.asarray(tran["b"])
    assert t[-1] == pytest.approx(3e-9, rel=1e-6)
    # first-order RC step response; trapezoidal integration at 10 ps steps: 1e-3 is ample
    np.testing.assert_allclose(v, 1.0 - np.exp(-t / 1e-9), atol=1e-3)


def _text(err: SimulationError) -> str:
    return (str(err) + "\n" + (err.log or "")).lower()


@pytest.mark.parametrize("backend", BACKENDS)
def test_timestep_too_small_mid_run_is_an_error(backend):
    # Protection: failure detection; a run aborted part-way must not come back as a short result.
    with pytest.raises(SimulationError) as err:
        engine.run_transient(TIMESTEP_TOO_SMALL, backend=backend, timeout_s=60)
    assert "timestep too small" in _text(err.value)  # ngspice's own words
    assert err.value.hint, "a hint is expected"
    assert_next_run_works(backend)


@pytest.mark.parametrize("backend", BACKENDS)
def test_singular_matrix_names_the_cause(backend):
    # Protection: diagnose() keeps ngspice's 'singular matrix' note and hints at its causes.
    with pytest.raises(SimulationError) as err:
        engine.run_transient(SINGULAR, backend=backend, timeout_s=60)
    assert "singular matrix" in str(err.value).lower()  # in the one-line message itself
    assert "v1#branch" in err.value.log.lower()          # ngspice's full report in .log
    assert "floating node" in err.value.hint or "loop" in err.value.hint
    assert_next_run_works(backend)


@pytest.mark.parametrize("backend", BACKENDS)
def test_operating_point_without_solution_hints_at_convergence(backend):
    # Protection: diagnose(); the hint must address convergence (gmin/source stepping failed),
    # not transmission-line breakpoints.
    with pytest.raises(SimulationError) as err:
        engine.run_op(NO_SOLUTION, backend=backend, timeout_s=60)
    assert "stepping failed" in err.value.log.lower()  # ngspice's own messages kept
    assert "converge" in err.value.hint.lower()
    assert_next_run_works(backend)


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_endless_run_is_stopped_by_the_time_limit(backend):
    # Protection: timeout_s (the worker / executable is killed). Without it this test never ends.
    with pytest.raises(SimulationError) as err:
        engine.run_transient(ENDLESS, backend=backend, timeout_s=2.0)
    assert "time limit" in str(err.value)
    assert err.value.hint
    assert_next_run_works(backend)


def test_killed_worker_is_a_simulation_error_and_is_replaced():
    # Protection: the worker process. libngspice dying (here: SIGKILL, as a segfault would)
    # ends the call with SimulationError; this process survives; the next call gets a new worker.
    engine.run_op(DIVIDER, backend="shared", timeout_s=60)
    pid = engine.worker_pid()
    assert pid is not None and pid != os.getpid()
    killer = threading.Timer(1.0, os.kill, args=(pid, signal.SIGKILL))
    killer.start()
    try:
        with pytest.raises(SimulationError) as err:
            engine.run_transient(ENDLESS, backend="shared", timeout_s=120)
    finally:
        killer.cancel()
    message = str(err.value).lower()
    assert "died" in message or "crash" in message
    assert "time limit" not in message  # it was noticed as a crash, not waited out
    assert_next_run_works("shared")
    assert engine.worker_pid() not in (None, pid)


def test_shell_in_control_block_is_refused_before_running():
    # Protection: check_netlist's shell refusal, applied by every run_* call.
    netlist = DIVIDER.replace(".end\n", ".control\nshell touch /tmp/netgen_should_not_exist\n.endc\n.end\n")
    for backend in BACKENDS:
        with pytest.raises(SimulationError) as err:
            engine.run_op(netlist, backend=backend, timeout_s=60)
        assert "shell" in str(err.value)
    assert not os.path.exists("/tmp/netgen_should_not_exist")
