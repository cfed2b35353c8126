"""Tests of netgen.periodic.estimator: the periodic steady state computed directly from the netlist.

What is checked, and against what:

* the network's impedance at the device port against scikit-rf built from the sized values
  (an independent library; the same models as tests/test_network_ac.py);
* a switched first-order RC against its closed-form periodic solution (exponential charge and
  discharge, any circuits textbook);
* class F, class E and tuned class B estimates against Fourier series, Sokal's and Raab's values
  (docs/check_values.md) -- without running ngspice;
* the state written back into a netlist: ngspice started on it stays on the periodic orbit
  from the first cycle (a linear line circuit), and agrees with long cold ngspice runs;
* what the estimate does not model is said in one sentence, and the simulation falls back.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from netgen.periodic import initial_state
from netgen.netlist import cards as netlist_cards
from netgen.periodic import condense, estimator
from netgen.periodic.pwl_fourier import fourier_pwl
from netgen.design.schema import design_from_dict, load_design
from netgen.netlist.renderer import render
from netgen.synthesis.sizing import size
from netgen.synthesis.topologies import TOPOLOGY_REGISTRY

SIMS = Path(__file__).resolve().parents[1] / "sims"
PI = math.pi


def _estimate(sized):
    d = sized.design
    return estimator.estimate(render(sized, mode="tran"), d.f0_hz, d.sim.points_per_cycle)


def _harmonic(state, node, n):
    """Amplitude of harmonic n of a grid series (V or A)."""
    x = state.series[node]
    return 2 * abs(np.fft.rfft(x)[n]) / len(x) if n else float(np.mean(x))


# ------------------------------------------------------------ the linear network

@pytest.mark.parametrize("topology", list(TOPOLOGY_REGISTRY))
def test_port_impedance_matches_scikit_rf(topology):
    # Without Cout the device port sees the passive network alone. The trapezoidal rule warps
    # frequency by (omega h)^2 / 12 (1.2e-6 at 5 f0 on 16384 points), which a resonator of
    # quality Q turns into about 2 Q times that in Z.
    from test_network_ac import SkrfModel

    d = load_design(SIMS / f"{topology}.toml")
    raw = dict(d.raw)
    raw["device"] = {**raw.get("device", {}), "cout": "0 F"}
    sized = size(design_from_dict(raw, source=d.source))
    state = estimator.estimate(render(sized, mode="tran"), sized.design.f0_hz, 16384, cap=False)
    f = np.arange(1, 6) * sized.design.f0_hz
    z_sk = SkrfModel(sized, f).build()
    np.testing.assert_allclose(state.z_port[1:6], z_sk, rtol=1e-3)


def _switched_rc():
    """Vdd -- R1 -- dsw, C from dsw to ground, a switch (Ron) from dsw to ground, 40 % duty at 1 MHz."""
    return """switched RC
VDD vdd 0 DC 10
R1 vdd dsw 1k
C1 dsw 0 1n
S_SW dsw 0 ctrl 0 SWMOD
.model SWMOD SW(RON=100 ROFF=1e12 VT=0.5 VH=0.25)
VCTRL ctrl 0 PULSE(0 1 0 1n 1n 399n 1u)
RCTRL ctrl 0 1e6
.tran 1n 20u 0 1n uic
.end
"""


def test_switched_rc_matches_the_closed_form():
    # First-order circuit, exponential charge and discharge (any circuits textbook): off, v
    # tends to Vdd with tau_off = R1 C; on, to Vdd Ron/(R1 + Ron) with tau_on = (R1 || Ron) C.
    # Periodic: Vb = Von + (Va - Von) exp(-t_on/tau_on), Va = Vdd + (Vb - Vdd) exp(-t_off/tau_off),
    # Va the voltage at turn-on and Vb at turn-off.
    vdd, r1, ron, c = 10.0, 1e3, 100.0, 1e-9
    ctrl_edge, pw, period = 1e-9, 399e-9, 1e-6
    t_a = 0.75 * ctrl_edge                       # rising ramp crosses VT + VH = 0.75
    t_b = ctrl_edge + pw + 0.75 * ctrl_edge      # falling ramp crosses VT - VH = 0.25
    t_on, t_off = t_b - t_a, period - (t_b - t_a)
    v_on, tau_on, tau_off = vdd * ron / (r1 + ron), (r1 * ron / (r1 + ron)) * c, r1 * c
    a_on, a_off = math.exp(-t_on / tau_on), math.exp(-t_off / tau_off)
    # Va = vdd + (v_on + (Va - v_on) a_on - vdd) a_off  ->  linear in Va
    va = (vdd + (v_on * (1 - a_on) - vdd) * a_off) / (1 - a_on * a_off)
    vb = v_on + (va - v_on) * a_on
    state = estimator.estimate(_switched_rc(), 1e6, 2000)
    h = period / state.points
    # the grid puts the switching instants half-way between samples: compare the samples half a
    # step before each switching instant with the closed form there
    before_on = vdd + (vb - vdd) * math.exp(-(t_off - 0.5 * h) / tau_off)
    before_off = v_on + (va - v_on) * math.exp(-(t_on - 0.5 * h) / tau_on)
    # second order in the step: 8e-8 and 4e-7 at 2000 points (measured), 1.3e-6 / 6.3e-6 at 500
    assert float(state.at("dsw", t_a - 0.5 * h)) == pytest.approx(before_on, rel=2e-6)
    assert float(state.at("dsw", t_b - 0.5 * h)) == pytest.approx(before_off, rel=2e-6)
    # DC: the supply current is (Vdd - mean v) / R1 (Ohm's law on the mean; 1e-8 leaves room for
    # the 1e-12 S from every node to ground that SPICE, and the estimate, add)
    assert -state.mean("vdd#branch") == pytest.approx((vdd - state.mean("dsw")) / r1, rel=1e-8)


# ------------------------------------------------------------ published waveform theory

def test_class_f_estimate_is_a_square_voltage_with_half_sine_current():
    # Raab 1997 / Cripps: square voltage, half-sine current, efficiency -> 100 % for an ideal
    # switch. Fourier series of a square wave swinging 0..2 Vdd (docs/check_values.md):
    # V1 = (4/pi) Vdd, V3 = V1/3, even harmonics ~0.
    sized = size(design_from_dict({
        "design": {"name": "est_f", "topology": "class_f_line", "f0": "1 GHz", "vdd": "10 V",
                   "ropt": "100 ohm", "load": "50 ohm"},
        "device": {"model": "switch", "ron": "0.2 ohm"},
        "network": {"inductor_q": 2000},
        "sim": {"points_per_cycle": 1000},
    }))
    state = _estimate(sized)
    v1, v2, v3 = (_harmonic(state, "drain", n) for n in (1, 2, 3))
    assert v1 == pytest.approx(4 / PI * 10.0, rel=0.02)
    assert v3 == pytest.approx(v1 / 3, rel=0.05)
    assert v2 < 0.1 * v3
    pdc = -10.0 * state.mean("vdd#branch")
    vl = state.series["load"]
    p1 = (2 * abs(np.fft.rfft(vl)[1]) / len(vl)) ** 2 / (2 * 50.0)
    assert p1 / pdc >= 0.95
    # half-sine current pulse train: Idc = Imax/pi, I1 = Imax/2 (Fourier series, docs/check_values.md), within 3 %
    i_d = state.series["vidrain#branch"]
    imax = float(np.max(i_d))
    assert _harmonic(state, "vidrain#branch", 0) == pytest.approx(imax / PI, rel=0.03)
    assert _harmonic(state, "vidrain#branch", 1) == pytest.approx(imax / 2, rel=0.03)


def test_class_e_estimate_at_sokal_values():
    # Sokal & Sokal 1975 (docs/check_values.md): peak switch voltage 3.562 Vdd at high Q; 3.579 at a
    # loaded Q of 100 (recalled from memory, Raab 1977); zero-voltage turn-on.
    sized = size(design_from_dict({
        "design": {"name": "est_e", "topology": "class_e", "f0": "10 MHz", "vdd": "12 V",
                   "pout": "5 W", "load": "50 ohm"},
        "device": {"model": "switch", "ron": "0.005 ohm"},
        "network": {"loaded_q": 100},
        "sim": {"points_per_cycle": 2000},
    }))
    state = _estimate(sized)
    assert state.peaks["vd_max_v"] / 12.0 == pytest.approx(3.579, rel=0.01)
    # the drain voltage just before turn-on is close to zero (zero-voltage switching), here
    # under 2 % of the peak
    assert abs(float(state.at("drain", state.t0_s - state.period_s / 2000))) < 0.02 * state.peaks["vd_max_v"]


def test_tuned_class_b_estimate_efficiency_is_pi_over_4_times_swing():
    # Raab / Cripps: a half-sine current into a tuned load gives eta = (pi/4) (V1/Vdd).
    sized = size(design_from_dict({
        "design": {"name": "est_b", "topology": "class_b_tuned", "f0": "100 MHz", "vdd": "12 V",
                   "pout": "5 W", "load": "50 ohm"},
        "device": {"model": "gm"},
        "sim": {"points_per_cycle": 500},
    }))
    state = _estimate(sized)
    pdc = -12.0 * state.mean("vdd#branch")
    v1 = _harmonic(state, "drain", 1)
    p1 = 0.5 * v1 * _harmonic(state, "vidrain#branch", 1)  # drain fundamental power, V1 I1 / 2
    assert p1 / pdc == pytest.approx(PI / 4 * v1 / 12.0, rel=0.01)
    assert float(state.series["dsw#device"].min()) >= -1e-9  # the device never sources current


# ------------------------------------------------------------ written back into ngspice

def _line_circuit(f0_hz):
    T = 1 / f0_hz
    return f"""line history check
VS src 0 PULSE(0 10 0 20p 20p 480p 1n)
RS src a 50
T1 a 0 b 0 Z0=70 TD={T / 7:.12g}
RL b dsw 0.5
RLOAD dsw 0 100
CL dsw 0 1p
BDEV dsw 0 I=0*v(dsw)
.options method=trap minbreak={T / 1e5:.6g}
.tran {T / 1000:.12g} {6 * T:.12g} 0 {T / 1000:.12g} uic
.end
"""


@pytest.mark.ngspice
def test_a_line_started_on_the_estimate_carries_its_periodic_waves_from_the_first_cycle():
    # A pulse source into a lossless line (TD = T/7) and a load: a linear circuit whose periodic
    # state the estimate gives. Started on it, ngspice's first cycle equals the sixth (the waves
    # the line carries are right from t = 0); with the line left empty (the other states still
    # set) the first cycle is off by about 1 %.
    import dataclasses

    from netgen.simulator import engine

    f0 = 1e9
    T = 1 / f0
    net = _line_circuit(f0)
    state = estimator.estimate(net, f0, 1000)
    started = initial_state.with_initial_state(net, state)
    assert "Vhist_t1_1 a hist_t1_1 PWL(" in started and "IC=" in started
    lumped_only = dataclasses.replace(state, elements={k: v for k, v in state.elements.items() if v[0] != "T"})
    empty_line = initial_state.with_initial_state(net, lumped_only)
    assert "hist_" not in empty_line
    for netlist, limit in ((started, 2e-4), (empty_line, None)):
        v = engine.run_transient(netlist, save=["b", "a"])
        first = fourier_pwl(v["time"], v["b"], 0.0, T, 5)
        last = fourier_pwl(v["time"], v["b"], 5 * T, T, 5)
        err = float(np.max(np.abs(first[1:] - last[1:]))) / abs(last[1])
        if limit is not None:
            assert err < limit
        else:
            assert err > 25 * 2e-4


class _Release:
    """A stop_check (picklable: module level) that sends ``commands`` at its first stop only."""

    def __init__(self, commands, before_s):
        self.commands, self.before_s = commands, before_s

    def __call__(self, t_end, part):
        from netgen.simulator import engine

        return False, None, (engine.Resume(self.commands, None) if t_end < self.before_s else None)


def test_history_sources_are_retired_after_the_longest_delay_at_a_half_period():
    f0 = 1e9
    T = 1 / f0
    state = estimator.estimate(_line_circuit(f0), f0, 1000)
    t_s, commands = initial_state.history_release(state)
    assert t_s == pytest.approx(T / 2)  # TD = T/7: the first half period after it
    assert len(commands) == 4  # V and I source at each of the two ports
    assert all(c.startswith("alter @") and c.endswith("[pwl] = [ 0 0 1 0 ]") for c in commands)
    import dataclasses

    long_line = dataclasses.replace(state, lines={k: (z0, 1.2 * T, n) for k, (z0, _, n) in state.lines.items()})
    assert initial_state.history_release(long_line)[0] == pytest.approx(1.5 * T)
    assert initial_state.history_release(dataclasses.replace(state, lines={})) is None


@pytest.mark.ngspice
@pytest.mark.parametrize("backend", ["shared", "batch"])
def test_retiring_the_history_sources_changes_no_result(backend):
    # After the line delay the sources are zero; setting their PWL to a constant zero at a pause
    # (ngspice alter, both simulator paths) must leave every later time point where it was:
    # the same circuit, the same equations (exact up to rounding).
    from netgen.simulator import engine

    f0 = 1e9
    T = 1 / f0
    net = _line_circuit(f0)
    state = estimator.estimate(net, f0, 1000)
    started = initial_state.with_initial_state(net, state)
    t_s, commands = initial_state.history_release(state)
    plain = engine.run_transient(started, save=["b"], backend=backend)
    paused = engine.run_transient(started, save=["b"], backend=backend, stop_check=_Release(commands, T),
                                  chunk_s=t_s)
    a = fourier_pwl(plain["time"], plain["b"], 5 * T, T, 5)
    b = fourier_pwl(paused["time"], paused["b"], 5 * T, T, 5)
    np.testing.assert_allclose(b, a, rtol=0, atol=1e-6 * abs(a[1]))
    # the control: the same commands half-way through the delay cut the history short, and the
    # first cycle moves (so the alter above did act, on this path too)
    early = engine.run_transient(started, save=["b"], backend=backend, stop_check=_Release(commands, T),
                                 chunk_s=T / 14)
    first = fourier_pwl(plain["time"], plain["b"], 0.0, T, 5)
    cut = fourier_pwl(early["time"], early["b"], 0.0, T, 5)
    assert float(np.max(np.abs(cut[1:] - first[1:]))) > 1e-3 * abs(first[1])


@pytest.mark.ngspice
@pytest.mark.slow
@pytest.mark.parametrize("name", ["class_f_lumped", "class_b_tuned"])
def test_estimate_agrees_with_a_long_cold_ngspice_run(name):
    # ngspice from zero for 1000 cycles (naive cold runs of these examples settle within 0.1 %
    # after 143 and 704 cycles, docs/benchmarks.md): its last ten cycles' DC and load power
    # against the estimate, within 0.1 %.
    from netgen.simulator import engine

    sized = size(load_design(SIMS / f"{name}.toml"))
    d = sized.design
    T = 1 / d.f0_hz
    state = _estimate(sized)
    cold = render(sized, mode="tran", tstop_s=1000 * T).replace(" uic", "")
    v = engine.run_transient(cold, save=["load", "vdd#branch"], keep_s=11 * T)
    t0 = 990 * T
    pdc = -d.vdd_v * float(fourier_pwl(v["time"], v["vdd#branch"], t0, T, 0, 10)[0].real)
    load = np.asarray(v["load"])
    tt = t0 + np.arange(10000) * (10 * T / 10000)
    pload = float(np.mean(np.interp(tt, v["time"], load) ** 2)) / d.load_ohm
    assert -d.vdd_v * state.mean("vdd#branch") == pytest.approx(pdc, rel=1e-3)
    assert state.mean_square("load") / d.load_ohm == pytest.approx(pload, rel=1e-3)


# ------------------------------------------------------------ what it does not model

def test_a_subcircuit_device_is_not_estimated(tmp_path):
    model = tmp_path / "dev.lib"
    model.write_text(".subckt mydev d g s\nR1 d s 10\n.ends\n", encoding="ascii")
    sized = size(design_from_dict({
        "design": {"name": "sub", "topology": "class_f_line", "f0": "1 GHz", "vdd": "10 V",
                   "ropt": "100 ohm"},
        "device": {"model": "spice", "include": str(model), "subckt": "mydev", "pins": ["drain", "gate", "source"]},
    }, source=tmp_path / "d.toml"))
    with pytest.raises(estimator.Unsupported, match="subcircuit"):
        _estimate(sized)


@pytest.mark.parametrize("expr", [
    "__import__('os').system('true')", "v(dsw).real", "open('x')", "v(dsw)[0]", "lambda: 1", "i(vdd)*2",
])
def test_device_expressions_outside_the_safe_set_are_refused(expr):
    with pytest.raises(estimator.Unsupported):
        f, _ = netlist_cards.device_expression(expr, "BDEV")
        f({"dsw": np.zeros(3), "time": np.zeros(3)})


def test_device_expressions_evaluate_like_ngspice():
    # the transconductance macro of templates/devices.j2: min(Imax, gm uramp(vg)) tanh(uramp(v)/Vk)
    f, nodes = netlist_cards.device_expression("(1.5-uramp(1.5-2*uramp(v(gate))))*tanh(uramp(v(dsw))/1)", "BDEV")
    assert nodes == {"gate", "dsw"}
    vals = {"gate": np.array([-1.0, 0.25, 2.0]), "dsw": np.array([3.0, 3.0, -1.0]), "time": np.zeros(3)}
    np.testing.assert_allclose(f(vals), [0.0, 0.5 * math.tanh(3.0), 0.0])
    g, _ = netlist_cards.device_expression("v(a,b)*2.5k + 1meg*time", "B1")
    np.testing.assert_allclose(g({"a": np.array([1.0]), "b": np.array([0.5]), "time": np.array([1e-6])}),
                               [1250.0 + 1.0])


def test_cards_join_continuations_and_skip_control_and_subcircuit_blocks():
    text = ("title\nR1 a b\n+ 50\n* comment\n.subckt inner x y\nR9 x y 1\n.ends\n"
            ".control\nrun\n+ more\n.endc\nC1 a 0 1p\n.end\n")
    cards = netlist_cards.read_cards(text)
    assert [c.text for c in cards] == ["R1 a b 50", "C1 a 0 1p", ".end"]
    assert (cards[0].start, cards[0].stop) == (1, 3)


# ------------------------------------------------------------ what a run reports about its start

@pytest.mark.ngspice
@pytest.mark.parametrize("name", ["demo", "class_e", "class_b_tuned"])
def test_a_run_reports_its_start_and_the_two_solutions_agree(name):
    # ngspice (variable step, its own line model) and the direct periodic solution (uniform
    # trapezoidal grid) are two solvers of one circuit: their Pdc and Pout agree within the
    # 0.1 % settling tolerance (measured 0.004-0.07 %)
    from netgen.pipeline import run_design
    from netgen.results.report import format_table

    r = run_design(load_design(SIMS / f"{name}.toml"), None, plots=False)
    start = r.metrics["start"]
    assert start["method"] == "periodic" and start["reason"] is None
    assert start["estimate_deviation"] < 1e-3
    assert "Started on the periodic steady state computed from the netlist" in format_table(r.metrics)


def test_the_start_sentence_names_the_fallback_and_its_reason():
    from netgen.results.report import start_text

    assert start_text({"method": "dc", "reason": "XDEV: the device is a subcircuit"}) == (
        "Started from the DC state of feed and block (XDEV: the device is a subcircuit).")
    assert start_text({"method": "cold"}) == "Started from zero (sim.warm_start = false)."
    assert start_text({}) == ""


@pytest.mark.parametrize("name", ["demo", "class_f_lumped", "class_f_feed"])
def test_folded_and_condensed_solve_gives_the_full_mna_solution(name):
    # Modified nodal analysis (Ho, Ruehli & Brennan, IEEE T-CAS 1975): an inductor's branch
    # unknown and its admittance 1/(sL) between the same nodes describe the same circuit at every
    # s != 0, with i_L = (v_a - v_b)/(sL); and Gaussian elimination of a node coupled to two
    # others is exact (a Schur complement; Tinney & Walker, Proc. IEEE 1967). The estimate solves
    # bins 1.. folded and condensed; here every unknown of every bin is compared with the plain
    # MNA solve of the whole system by LAPACK's partial pivoting.
    sized = size(load_design(SIMS / f"{name}.toml"))
    d = sized.design
    text = render(sized, mode="tran")
    cards = netlist_cards.read_cards(text)
    dev = estimator.read_device(cards, netlist_cards.model_cards(cards), 1 / d.f0_hz, 200)
    net, _ = estimator._network(cards, {dev.name.upper(), *(x.upper() for x in dev.extra)}, 1 / d.f0_hz)
    assert any(k[0] == "L" for k in net.branches)  # the case the folding is for
    M = 200
    theta = 2 * PI * np.arange(M // 2 + 1) / M
    h = 1 / d.f0_hz / M
    s = 2j / h * np.tan(theta / 2)
    s[-1] = 2j / h * 1e3  # the capped Nyquist bin, as the estimate does
    cols = [net.index["dsw"]]
    got = estimator._solve_bins(net, s, theta, 1 / d.f0_hz, M, 0.0, cols)
    Y, b = net.assemble(s, theta, 1 / d.f0_hz, M, 0.0)
    draw = np.zeros(b.shape + (1,), complex)
    draw[:, cols[0], 0] = -1.0
    want = np.linalg.solve(Y, np.concatenate([b[..., None], draw], axis=-1))
    scale = np.abs(want).max(axis=(0, 1), keepdims=True)
    assert np.abs(got - want).max() / scale.max() < 1e-9
    assert got.shape == want.shape


def _ladder_system(rng, K, weak_bin=None):
    """Entries of a small MNA system: nodes 0..4 in a chain (0-1-2-3-4, 1 to 3 coupled only to their
    neighbours and ground), node 4 also tied to node 0, and a voltage source (branch 5) from node 0
    to ground; the right-hand side drives the source and draws current at node 4."""
    Y = {}

    def cond(a, b, y):
        for r, c, sgn in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            if r is not None and c is not None:
                Y[(r, c)] = Y.get((r, c), 0.0) + sgn * y

    for a, b in ((0, 1), (1, 2), (2, 3), (3, 4), (4, 0)):
        cond(a, b, rng.uniform(0.5, 2.0, K) + 1j * rng.uniform(-1, 1, K))
    for a in range(5):
        cond(a, None, rng.uniform(0.1, 0.3, K) + 0j)
    if weak_bin is not None:  # node 2's pivot cancels at one bin: a near-resonant inner node
        y = Y[(2, 2)].copy()
        Y[(2, 2)] = Y[(2, 2)] - np.where(np.arange(K) == weak_bin, y * (1 - 1e-9), 0.0)
    Y[(0, 5)], Y[(5, 0)] = 1.0, 1.0  # source current into KCL of node 0; row: v_0 = V
    R = np.zeros((K, 6, 2), complex)
    R[:, 5, 0] = rng.uniform(1, 2, K)
    R[:, 4, 1] = -1.0
    return Y, R


def _dense(Y, R):
    K, n, _ = R.shape
    A = np.zeros((K, n, n), complex)
    for (r, c), y in Y.items():
        A[:, r, c] = y
    return np.linalg.solve(A, R)


def test_condensed_solve_replays_its_order_and_falls_back_on_a_weak_pivot():
    # Gaussian elimination is exact in any order with non-zero pivots (any numerical-analysis
    # text); the order found on one matrix is replayed on the next of the same structure, and a
    # replayed step whose pivot fails the test (here |Y_22| ~ 1e-9 of its couplings at one bin)
    # hands over to the search, which keeps that node for the dense solve. Each result must be
    # LAPACK's partial-pivoting solve of the whole system.
    rng = np.random.default_rng(5)
    condense._PLANS.clear()
    condense._SOURCE_PLANS.clear()
    for weak in (None, None, 7, None):
        Y, R = _ladder_system(rng, 12, weak)
        want = _dense(dict(Y), R.copy())
        got = condense.solve_condensed(condense.Entries.from_dict(Y, 12), R.copy(), 5, [(5, 0, None)])
        assert np.abs(got - want).max() < 1e-9 * np.abs(want).max()
    assert len(condense._PLANS) == 1  # one structure, one order (the weak pivot's search not stored)
