"""Tests of netgen.simulator.engine (both simulator paths) and netgen.simulator.rawfile."""

from __future__ import annotations

import os
import re
import signal
import struct

import numpy as np
import pytest

from netgen.simulator import engine
from netgen.simulator.checks import short_run
from netgen.errors import SimulationError
from netgen.simulator.rawfile import parse_raw

F0 = 1e9
T = 1 / F0

# A small switching circuit: supply, 1 uH choke, S switch at 50 % duty, 100 pF block,
# parallel tank (1.59 nH || 15.9 pF, resonant at 1 GHz) and 50 ohm load.
SWITCHING = """switching test circuit
VDD vdd 0 DC 10
L_feed vdd drain 1u
VIDRAIN drain dint DC 0
S1 dint 0 g 0 SWMOD
.model SWMOD SW(RON=0.2 ROFF=1e6 VT=0.5 VH=0)
VG g 0 PULSE(0 1 0 1p 1p 0.499n 1n)
C_block drain load 100p
L_tank load 0 1.59n
C_tank load 0 15.9p
RLOAD load 0 50
.options minbreak=1e-14
.tran 1p 20n 0 1p
.end
"""

DIVIDER = "divider\nV1 in 0 DC 10\nR1 in out 1k\nR2 out 0 3k\n.end\n"


def _powers(vec, t0, t1):
    """DC supply power and load power averaged over [t0, t1] on a uniform grid."""
    grid = np.linspace(t0, t1, 4001)[:-1]
    isup = -np.interp(grid, vec["time"], vec["vdd#branch"])
    vl = np.interp(grid, vec["time"], vec["load"])
    return 10 * isup.mean(), np.mean(vl ** 2) / 50


@pytest.mark.ngspice
def test_shared_and_batch_agree_within_0p1_percent():
    # Same netlist through libngspice and through the executable: the two paths must
    # report the same DC and load power within 0.1 % (task requirement; both are ngspice 39).
    res = {b: engine.run_transient(SWITCHING, backend=b, save=["load", "vdd#branch"]) for b in ("shared", "batch")}
    p = {b: _powers(v, 15 * T, 20 * T) for b, v in res.items()}
    assert p["shared"][0] > 0.01 and p["shared"][1] > 0.01
    np.testing.assert_allclose(p["shared"], p["batch"], rtol=1e-3)
    assert res["shared"]["time"].dtype == np.float64
    assert type(res["shared"]["load"]) is np.ndarray  # plain arrays, no unit-carrying subclass


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_op_divider(backend):
    # Ohm's law: 10 V * 3k / (1k + 3k) = 7.5 V, current 10 V / 4k = 2.5 mA drawn from V1.
    op = engine.run_op(DIVIDER, backend=backend)
    assert op["out"] == pytest.approx(7.5, rel=1e-9)
    assert op["v(out)"] == op["out"]  # raw-file spelling is an alias
    assert op["v1#branch"] == pytest.approx(-2.5e-3, rel=1e-9)


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_ac_parallel_rlc_matches_formula(backend):
    # Parallel RLC driven by a 1 A AC current: Z = 1 / (1/R + j w C + 1/(j w L))
    # (textbook impedance of a parallel resonator, e.g. Pozar ch. 6).
    net = ("rlc\nIPORT 0 n AC 1\nR1 n 0 50\nL1 n 0 1.59n\nC1 n 0 15.9p\n"
           ".ac lin 9 0.5e9 4.5e9\n.end\n")
    f, vec = engine.run_ac(net, backend=backend)
    w = 2 * np.pi * f
    z = 1 / (1 / 50 + 1j * w * 15.9e-12 + 1 / (1j * w * 1.59e-9))
    assert f.dtype == np.float64 and vec["n"].dtype == np.complex128
    np.testing.assert_allclose(vec["n"], z, rtol=1e-6)


class StopAfter:
    """A picklable stop_check: stop once 6 periods are simulated."""

    def __init__(self):
        self.calls = 0

    def __call__(self, t, vec):
        self.calls += 1
        return t >= 6 * T, f"at {t:.3g}"


@pytest.mark.ngspice
def test_chunked_run_stops_on_check_and_reports_progress():
    msgs = []
    res = engine.run_transient(SWITCHING, chunk_s=2 * T, stop_check=StopAfter(), progress=msgs.append,
                               save=["load", "vdd#branch"])
    assert res.stopped_early
    assert 6 * T <= res["time"][-1] < 8 * T
    assert res.checker.calls == 3 and len(msgs) == 3


@pytest.mark.ngspice
def test_local_stop_check_is_refused_clearly():
    def local(t, vec):
        return False

    with pytest.raises(SimulationError, match="module level"):
        engine.run_transient(SWITCHING, chunk_s=2 * T, stop_check=local)


@pytest.mark.ngspice
def test_worker_crash_raises_and_caller_survives():
    def kill_worker(_msg):
        os.kill(engine.worker_pid(), signal.SIGKILL)

    with pytest.raises(SimulationError, match="worker process died"):
        engine.run_transient(SWITCHING, chunk_s=2 * T, progress=kill_worker)
    # a fresh worker serves the next run
    assert engine.run_op(DIVIDER)["out"] == pytest.approx(7.5)


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_timeout_raises(backend):
    long = SWITCHING.replace(".tran 1p 20n 0 1p", ".tran 1p 100u 0 1p")
    with pytest.raises(SimulationError, match="time limit of 0.5 s") as info:
        engine.run_transient(long, backend=backend, timeout_s=0.5)
    assert "sim.timeout" in info.value.hint


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_singular_matrix_has_message_and_hint(backend):
    # Two voltage sources in parallel: the MNA matrix is singular (common practice).
    net = "loop\nV1 a 0 DC 1\nV2 a 0 DC 2\nR1 a 0 1k\n.end\n"
    with pytest.raises(SimulationError) as info:
        engine.run_op(net, backend=backend)
    assert "singular matrix" in str(info.value)
    assert "loop of voltage sources" in info.value.hint
    assert "singular matrix" in info.value.log


@pytest.mark.ngspice
def test_unknown_subcircuit_reports_ngspice_message():
    net = "bad\nV1 a 0 DC 1\nX1 a 0 nosuch\n.end\n"
    with pytest.raises(SimulationError, match="unknown subckt"):
        engine.run_op(net)


def test_control_blocks_are_refused_whatever_they_hold():
    # Protection: check_netlist refuses every control block (pashape sends its own commands), so
    # the check does not depend on which commands a block holds.
    net = DIVIDER.replace(".end", ".control\nop\nshell rm -rf /tmp/somewhere\n.endc\n.end")
    with pytest.raises(SimulationError, match=r"line 5: '\.control' starts an ngspice control command"):
        engine.check_netlist(net)
    engine.check_netlist(net, allow_shell=True)  # the library caller's explicit choice
    with pytest.raises(SimulationError, match="shell"):
        engine.check_netlist("t\nV1 a 0 DC 1\n.control\nop\n.endc\n.end\n")  # a harmless block too
    engine.check_netlist(DIVIDER)


def test_unknown_backend():
    with pytest.raises(SimulationError, match="Unknown simulator backend 'xyz'"):
        engine.run_op(DIVIDER, backend="xyz")


def test_vector_aliases():
    v = engine.Vectors({"drain": 1, "vdd#branch": 2})
    assert v["v(drain)"] == 1 and v["i(vdd)"] == 2 and "V(DRAIN)" in v
    with pytest.raises(KeyError):
        v["load"]


def _raw_header(flags, names, npts, kind):
    lines = ["Title: t", "Date: x", "Plotname: Transient Analysis", f"Flags: {flags}",
             f"No. Variables: {len(names)}", f"No. Points: {npts}", "Variables:"]
    lines += [f"\t{i}\t{n}\t{'time' if i == 0 else 'voltage'}" for i, n in enumerate(names)]
    lines.append(kind)
    return ("\n".join(lines) + "\n").encode()


def test_rawfile_binary_and_ascii():
    # Layout per the ngspice manual's raw-file description: point-major float64 values.
    t = np.array([0.0, 1e-9, 2e-9])
    v = np.array([1.0, -2.5, 3.25])
    blob = _raw_header("real", ["time", "v(out)"], 3, "Binary:") + b"".join(
        struct.pack("<dd", a, b) for a, b in zip(t, v))
    (plot,) = parse_raw(blob)
    np.testing.assert_array_equal(plot.data["v(out)"], v)
    text = "".join(f" {k}\t{a:.15e}\n\t{b:.15e}\n" for k, (a, b) in enumerate(zip(t, v))).encode()
    (plot,) = parse_raw(_raw_header("real", ["time", "v(out)"], 3, "Values:") + text)
    np.testing.assert_allclose(plot.data["time"], t)
    cblob = _raw_header("complex", ["frequency", "v(n)"], 1, "Binary:") + struct.pack("<dddd", 1e9, 0, 3, -4)
    (plot,) = parse_raw(cblob)
    assert plot.complex and plot.data["v(n)"][0] == 3 - 4j


def test_rawfile_rejects_other_files():
    with pytest.raises(SimulationError, match="not an ngspice raw file"):
        parse_raw(b"hello world\n")


@pytest.mark.ngspice
def test_doctor_report_finds_both_paths():
    rep = engine.doctor_report()
    assert rep["executable"] and rep["version"].startswith("39")
    assert rep["shared_ok"] and rep["batch_ok"] and rep["fixes"] == []
    # what 'pashape doctor' prints: one check per path (Ohm's law: the 1k/1k divider gives 5 V)
    assert [c["ok"] for c in rep["checks"]] == [True, True]
    assert all("5 V" in c["detail"] and c["fix"] is None for c in rep["checks"])


@pytest.mark.ngspice
def test_doctor_report_names_the_fix_for_a_missing_executable(monkeypatch):
    monkeypatch.setenv(engine.EXECUTABLE_ENV, "/nonexistent/ngspice")
    rep = engine.doctor_report()
    assert rep["shared_ok"] and not rep["batch_ok"]
    (bad,) = [c for c in rep["checks"] if not c["ok"]]
    assert "not found" in bad["detail"] and engine.EXECUTABLE_ENV in bad["fix"]


# ---------------------------------------------------------------- failures mid-run and diagnosis

# C dv/dt = k v^2 with v(0) = 1 V, C = 1 pF, k = 1e-3 A/V^2: v(t) = v0 / (1 - k v0 t / C) reaches
# infinity at t* = C / (k v0) = 1 ns (separable ODE, any calculus textbook); the 1 Mohm leak
# (1e-6 A against 1e-3 A) moves t* by about 0.1 %. ngspice must stop there, before the 10 ns asked for.
BLOWUP = """finite-time blow-up
C1 x 0 1p IC=1
B1 0 x I = 1e-3*v(x)*v(x)
R1 x 0 1meg
.tran 1p 10n uic
.end
"""


class NeverStop:
    """A picklable stop_check that never asks to stop."""

    def __call__(self, t, vec):
        return False


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
@pytest.mark.parametrize("chunked", [False, True])
def test_run_aborted_mid_way_is_an_error_naming_the_time(backend, chunked):
    kwargs = {"chunk_s": 0.3e-9, "stop_check": NeverStop()} if chunked else {}
    with pytest.raises(SimulationError) as info:
        engine.run_transient(BLOWUP, backend=backend, timeout_s=60, **kwargs)
    message = str(info.value)
    assert "Timestep too small" in message  # ngspice's own words in the one-line message
    t_fail = float(re.search(r"time = ([0-9.eE+-]+)", message).group(1))
    assert t_fail == pytest.approx(1e-9, rel=0.01)  # closed-form blow-up time t* = C/(k v0)
    assert "minbreak" in info.value.hint


# ngspice 39.3 log excerpts (measured on this machine, shared-library spelling with the
# stdout/stderr prefixes) for diagnose(): a circuit without a DC solution, two parallel voltage
# sources, and the blow-up above.
LOG_NO_DC = """stdout Note: Starting dynamic gmin stepping
stderr Warning: Dynamic gmin stepping failed
stdout Note: Starting source stepping
stderr Warning: source stepping failed
stdout Note: Transient op started
stderr Error: Transient op failed, timestep too small
stdout DC solution failed -
stderr doAnalyses: OP:  Timestep too small; trouble with node "b"
stderr op simulation(s) aborted"""
LOG_SINGULAR = """stderr Warning: singular matrix:  check node v1#branch
stderr Warning: Dynamic gmin stepping failed
stderr Warning: source stepping failed
stderr Error: Transient op failed, timestep too small
stderr doAnalyses: TRAN:  Timestep too small; initial timepoint: cause unrecorded.
stderr run simulation(s) aborted"""
LOG_MID_RUN = """stdout Using transient initial conditions
stderr doAnalyses: TRAN:  Timestep too small; time = 1.00005e-09, timestep = 8.42236e-24: trouble with node "x"
stderr run simulation(s) aborted"""


def test_diagnose_picks_the_most_specific_cause():
    line, hint = engine.diagnose(LOG_NO_DC)
    assert line.startswith("Error: Transient op failed") and "stepping failed" in line
    assert "converge" in hint and ".nodeset" in hint and "minbreak" not in hint
    line, hint = engine.diagnose(LOG_SINGULAR)
    assert "singular matrix:  check node v1#branch" in line
    assert "loop of voltage sources" in hint
    line, hint = engine.diagnose(LOG_MID_RUN)
    assert line.startswith("doAnalyses: TRAN:  Timestep too small; time = 1.00005e-09")
    assert "minbreak" in hint
    assert engine.diagnose("stdout No. of Data Rows : 11\n") == ("", "")


# ---------------------------------------------------------------- shell hidden in included files

SHELL_BLOCK = ".control\nshell touch /tmp/netgen_should_not_exist\n.endc\n"


def test_control_block_in_an_included_file_is_refused(tmp_path):
    # ngspice 39 runs .control blocks of included files (measured, docs/reliability.md).
    (tmp_path / "m.lib").write_text(".subckt m a b\nR1 a b 1k\n.ends\n" + SHELL_BLOCK)
    netlist = f'inc test\n.include "{tmp_path / "m.lib"}"\nV1 a 0 DC 1\nX1 a 0 m\n.end\n'
    with pytest.raises(SimulationError, match=r"model file .*m\.lib line 4: '\.control'"):
        engine.check_netlist(netlist)
    (tmp_path / "m.lib").write_text(".subckt m a b\nR1 a b 1k\n.ends\n")
    engine.check_netlist(netlist)  # the same file with models only passes


def test_relative_and_nested_includes_are_refused(tmp_path):
    # ngspice runs in a private folder, so a relative include would not be found there; a model
    # file may not include another (nested includes are where control blocks were hidden).
    (tmp_path / "inner.lib").write_text(".model sw1 sw ron=1\n")
    (tmp_path / "outer.lib").write_text(f'.subckt m a b\nR1 a b 1k\n.ends\n.inc "{tmp_path / "inner.lib"}"\n')
    with pytest.raises(SimulationError, match="not an absolute path"):
        engine.check_netlist("t\n.include outer.lib\nV1 a 0 DC 1\n.end\n", base_dir=tmp_path)
    with pytest.raises(SimulationError, match=r"outer\.lib line 4: a model file may not include other files"):
        engine.check_netlist(f't\n.include "{tmp_path / "outer.lib"}"\nV1 a 0 DC 1\n.end\n')
    assert engine.MAX_INCLUDE_DEPTH == 1


def test_base_dir_confines_includes(tmp_path):
    (tmp_path / "d").mkdir()
    (tmp_path / "m.lib").write_text(".model sw1 sw ron=1\n")
    netlist = f'.t\n.include "{tmp_path / "m.lib"}"\nV1 a 0 DC 1\n.end\n'
    engine.check_netlist(netlist, base_dir=tmp_path)
    with pytest.raises(SimulationError, match="outside the design folder"):
        engine.check_netlist(netlist, base_dir=tmp_path / "d")


def test_short_run_without_message_is_still_an_error():
    # A run that ends early with no ngspice error line (the silent case) still names where it
    # stopped and points at the time step (docs/simulator_notes.md: silent collapse with transmission lines).
    err = short_run(4.2e-9, 1e-8, "stdout No. of Data Rows : 420\n")
    assert "stopped at t = 4.2e-09 s, before the requested 1e-08 s without an error message" in str(err)
    assert "minbreak" in err.hint
    err = short_run(None, 1e-8, LOG_MID_RUN)
    assert "before its first time point" in str(err) and "Timestep too small" in str(err)


# ---------------------------------------------------------------- alter commands between chunks

ALTER_RC = """current source into a resistor
I1 0 out DC 1m
R1 out 0 1k
C1 out 0 1f
.tran 10p 10n 0 10p
.end
"""


class AlterOnce:
    """A picklable stop_check: at the first stop ask for I1 = 2 mA and a stop at 7 ns; never stop."""

    def __init__(self, command="alter i1 dc = 2e-3"):
        self.command = command
        self.stops = []

    def __call__(self, t, vec):
        self.stops.append(t)
        if len(self.stops) == 1:
            return False, "altered", engine.Resume((self.command,), stop_at_s=7e-9)
        return False, "", None


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_stop_check_alters_a_source_before_resume(backend):
    res = engine.run_transient(ALTER_RC, backend=backend, chunk_s=2e-9, stop_check=AlterOnce(),
                               save=["out"], timeout_s=60)
    t, v = res["time"], res["out"]
    # Ohm's law: 1 mA x 1 kOhm = 1 V before the alter at 2 ns, 2 mA x 1 kOhm = 2 V after
    # (RC = 1 fs; the trapezoidal rule rings after the step and is below 1e-5 V within 1 ns).
    assert np.all(np.abs(v[(t > 0.1e-9) & (t < 1.9e-9)] - 1.0) < 1e-6)
    assert np.all(np.abs(v[t > 3e-9] - 2.0) < 1e-5)
    stops = res.checker.stops
    assert stops[0] == pytest.approx(2e-9, rel=0.02)
    assert stops[1] == pytest.approx(7e-9, rel=0.02)  # Resume.stop_at_s sets the next stop
    assert stops[2] == pytest.approx(9e-9, rel=0.02)  # then chunk_s again


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_stop_check_commands_other_than_alter_are_refused(backend):
    with pytest.raises(SimulationError, match="only single 'alter'"):
        engine.run_transient(ALTER_RC, backend=backend, chunk_s=2e-9, timeout_s=60,
                             stop_check=AlterOnce("shell rm -rf x"))
