"""Harmonic load-pull at the intrinsic plane (netgen.studies.loadpull) against published analyses."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from netgen.errors import DesignError
from netgen.studies.loadpull import (
    IdealDevice,
    make_loadpull_plan,
    parse_termination,
    raab_current,
    solve_point,
)
from netgen.studies.loadpull_run import loadpull_outputs, run_loadpull

VDD, IMAX = 1.0, 1.0
#: class-B optimum load of a half-sine current of peak Imax: Ropt = 2 Vdd / Imax (Cripps,
#: "RF Power Amplifiers for Wireless Communications", the reduced-conduction-angle analysis)
ROPT = 2.0 * VDD / IMAX
OPEN = complex(np.inf)


def _best_efficiency(current: str, n_odd: int) -> tuple[float, float]:
    """Largest drain efficiency over a real Z1 with the odd harmonics 3..n_odd open, every other
    harmonic shorted; (efficiency, R)."""
    dev = IdealDevice("current", VDD, IMAX, current=current)
    z = {k: OPEN for k in range(3, n_odd + 1, 2)}

    def neg(r):
        return -solve_point(dev, {1: r, **z}, z0_ohm=ROPT)["drain_efficiency"]

    res = minimize_scalar(neg, bounds=(0.5 * ROPT, 2.0 * ROPT), method="bounded", options={"xatol": 1e-3})
    return -res.fun, res.x


def test_half_sine_current_source_optimum_sits_at_ropt():
    # Smith-chart grid of Z1 with every harmonic shorted: the efficiency optimum is the grid point
    # nearest Ropt (Gamma = 0 against Z0 = Ropt), and the refined optimum is Ropt itself, at
    # pi/4 (Cripps, class B: Ropt = 2 Vdd / Imax, efficiency pi/4)
    dev = IdealDevice("current", VDD, IMAX)
    plan = make_loadpull_plan(dev, z0_ohm=ROPT, f0_hz=1e9, terms={1: "grid:9:0.8"})
    eff = np.array([plan.run(i)["drain_efficiency"] for i in range(plan.n_points)])
    best = plan.point(int(np.argmax(eff)))["axes"]
    assert best["gamma1_mag"] < 1e-9
    r_best = _best_efficiency("half-sine", 1)
    assert r_best[1] == pytest.approx(ROPT, rel=0.01)
    assert r_best[0] == pytest.approx(math.pi / 4, abs=0.005)  # within 0.5 points (the knee costs ~0.2)


def test_raab_current_ratios():
    # largest I1/Idc of a non-negative current with even harmonics up to m: 1, sqrt(2), 1.5
    # (Raab, "Maximum efficiency and output of class-F power amplifiers", IEEE Trans. MTT 2001, Table)
    for m, ratio in ((1, 1.0), (2, math.sqrt(2.0)), (4, 1.5), (6, 1.5307)):
        i = raab_current(m, 512)
        c = np.fft.rfft(i) / i.size
        assert 2 * abs(c[1]) / c[0].real == pytest.approx(ratio, abs=2e-3)


#: Raab, "Maximum efficiency and output of class-F power amplifiers", IEEE Trans. MTT 2001:
#: maximum drain efficiency with current harmonics (DC, 1, even up to m) and voltage harmonics
#: (DC, 1, odd up to n); m = None is the half sine (all even harmonics)
RAAB_2001 = {(1, 1): 0.5000, (2, 3): 0.8165, (4, 5): 0.9053, (None, 1): 0.7854, (None, 3): 0.9069, (None, 5): 0.9481}
RAAB_2001_MORE = {(1, 3): 0.5774, (2, 1): 0.7071, (4, 3): 0.8660, (2, 5): 0.8536, (1, 5): 0.6036, (4, 1): 0.7500}


@pytest.mark.parametrize("m, n", sorted(RAAB_2001, key=str))
def test_raab_2001_optimum_efficiency(m, n):
    # the load-pull optimum over R with Raab's harmonic set matches his table within 0.5 points
    eta, _r = _best_efficiency("half-sine" if m is None else f"even:{m}", n)
    assert eta == pytest.approx(RAAB_2001[(m, n)], abs=0.005)


@pytest.mark.slow
@pytest.mark.parametrize("m, n", sorted(RAAB_2001_MORE, key=str))
def test_raab_2001_optimum_efficiency_rest_of_table(m, n):
    eta, _r = _best_efficiency(f"even:{m}", n)
    assert eta == pytest.approx(RAAB_2001_MORE[(m, n)], abs=0.005)


def test_continuous_class_b_j_family_keeps_efficiency_and_power():
    # Z1 = Ropt (1 + j alpha), Z2 = -j (3 pi / 8) alpha Ropt: efficiency pi/4 and constant Pout for
    # alpha in [-1, 1] (Cripps et al., IEEE MWCL 2009; Wright et al., IEEE T-MTT 2009)
    dev = IdealDevice("current", VDD, IMAX)
    p_ref = 0.5 * ROPT * (IMAX / 2) ** 2  # 1/2 R I1^2 with I1 = Imax / 2 (Fourier series of the half sine)
    for alpha in np.linspace(-1.0, 1.0, 9):
        m = solve_point(dev, {1: ROPT * (1 + 1j * alpha), 2: -1j * (3 * math.pi / 8) * alpha * ROPT}, z0_ohm=ROPT)
        assert m["drain_efficiency"] == pytest.approx(math.pi / 4, rel=0.01)
        assert m["pout_w"] == pytest.approx(p_ref, rel=0.01)
        assert m["min_vd_v"] > -0.01 * VDD  # the class-J voltage stays at or above zero


def test_open_termination_carries_no_current_and_short_no_voltage():
    # an open at 3 f0 forces I3 = 0, a short at 2 f0 forces V2 = 0 (definition of the terminations)
    m = solve_point(IdealDevice("current", VDD, IMAX), {1: 1.15 * ROPT, 3: OPEN}, z0_ohm=ROPT)
    i3 = complex(*m["i_n"][3])
    v2 = complex(*m["v_n"][2])
    assert abs(i3) < 1e-6 * IMAX
    assert abs(v2) < 1e-6 * VDD


def test_terminations_grammar():
    z0 = 50.0
    assert parse_termination("short", 2, z0).values == (0j,)
    assert np.isinf(parse_termination("open", 3, z0).values[0])
    ring = parse_termination("ring:0.5:4", 2, z0).values
    # Gamma = 0.5 at 0 deg is Z = Z0 (1 + 0.5)/(1 - 0.5) = 3 Z0 (definition of the reflection coefficient)
    assert ring[0] == pytest.approx(150.0)
    # the 5 x 5 grid (steps of 0.45) inside |Gamma| <= 0.9: 5 + 2 x 3 + 2 x 1 points
    assert len(parse_termination("grid:5:0.9", 1, z0).values) == 13
    for bad in ("ring:1.5:4", "grid:1", "-5+2j", "nonsense"):
        with pytest.raises(DesignError):
            parse_termination(bad, 2, z0)


def test_store_resumes_and_csv(tmp_path):
    dev = IdealDevice("current", VDD, IMAX, points=64)
    plan = make_loadpull_plan(dev, z0_ohm=ROPT, f0_hz=1e9, terms={1: "grid:3:0.5", 2: "ring:0.9:3"})
    first = run_loadpull(plan, tmp_path)
    assert first["ran"] == plan.n_points
    again = run_loadpull(plan, tmp_path)
    assert again == {**again, "ran": 0, "skipped": plan.n_points}
    summary = loadpull_outputs(plan, tmp_path, plots=True)
    lines = (tmp_path / "loadpull.csv").read_text().splitlines()
    assert len(lines) == plan.n_points + 1
    assert "gamma2_deg" in lines[0] and "drain_efficiency" in lines[0]
    assert (tmp_path / "smith_z1.png").is_file() and (tmp_path / "ring_z2.png").is_file()
    best = json.loads((tmp_path / "summary.json").read_text())["best"]
    assert best["drain_efficiency"] == pytest.approx(summary["best"]["drain_efficiency"])


def test_loadpull_command(netgen_cli, tmp_path):
    from tests.conftest import write_toml

    doc = {"design": {"name": "lp_cli", "topology": "class_f_line", "f0": "915 MHz", "vdd": "24 V", "pout": "8 W"}}
    path = write_toml(tmp_path / "d.toml", doc)
    code, out, err = netgen_cli("loadpull", path, "--z1", "grid:3", "--z3", "open", "--points", "64", "--quiet",
                                "--no-plots", "--no-confirm", "-o", tmp_path / "lp")
    assert code == 0, err
    assert "efficiency optimum" in out and "no load-pull point confirmed" in out
    code, out, err = netgen_cli("loadpull", path, "--confirm", "-1", "-o", tmp_path / "lp3")
    assert code == 2 and "--confirm" in err and "Traceback" not in err
    code, out, err = netgen_cli("loadpull", path, "--z2", "ring:2:4", "-o", tmp_path / "lp2")
    assert code == 2 and err.startswith("Error: --z2") and "Traceback" not in err


# ---------------------------------------------------------------- confirmation in ngspice

def _one_port_z(netlist: str, f_hz: float) -> complex:
    """Impedance from the drain to ground of a confirmation netlist at ``f_hz``: nodal analysis of
    its R, L, C parts (Kirchhoff's current law, one equation a node; common practice) with the
    supply and the 0 V senses as shorts, the device removed and 1 A injected at the drain."""
    from netgen.netlist import read_cards, spice_value

    cards = [c for c in read_cards(netlist) if not c.text.startswith(".")]
    alias = {"vdd": "0"}  # the supply is an AC short
    for c in cards:  # 0 V sources (senses, branch ends) join their nodes
        t = [x.lower() for x in c.tokens]
        if c.name[0] == "V" and c.name not in ("VDD",):
            alias[t[1]] = t[2]

    def node(x):
        while x in alias:
            x = alias[x]
        return x

    parts = [(c.name[0], node(c.tokens[1].lower()), node(c.tokens[2].lower()), spice_value(c.tokens[3], c.name))
             for c in cards if c.name[0] in "RLC"]
    names = sorted({n for _k, a, b, _v in parts for n in (a, b)} - {"0"})
    ix = {n: i for i, n in enumerate(names)}
    Y = np.zeros((len(names), len(names)), complex)
    w = 2 * math.pi * f_hz
    for kind, a, b, v in parts:
        y = 1 / v if kind == "R" else (1 / (1j * w * v) if kind == "L" else 1j * w * v)
        for p_, q_ in ((a, a), (b, b)):
            if p_ != "0":
                Y[ix[p_], ix[q_]] += y
        if a != "0" and b != "0":
            Y[ix[a], ix[b]] -= y
            Y[ix[b], ix[a]] -= y
    rhs = np.zeros(len(names), complex)
    rhs[ix[node("drain")]] = 1.0
    return complex(np.linalg.solve(Y, rhs)[ix[node("drain")]])


def test_confirmation_netlist_presents_each_termination_at_its_harmonic():
    # class J terminations (Cripps et al., IEEE MWCL 2009), an open third and a capacitor at the
    # fourth: the realised network must present exactly Z_n at n f0 and nearly a short above
    from netgen.studies.loadpull_confirm import CONFIRM_HARMONICS, loadpull_netlist

    f0 = 1e9
    alpha = 0.6
    dev = IdealDevice("current", 24.0, 0.96)
    plan = make_loadpull_plan(dev, z0_ohm=50.0, f0_hz=f0, terms={
        1: f"{50}+{50 * alpha}j", 2: f"0-{3 * math.pi / 8 * alpha * 50}j", 3: "open", 4: "C=2pF"})
    nl = loadpull_netlist(plan, 0)
    want = {1: complex(50, 50 * alpha), 2: complex(0, -3 * math.pi / 8 * alpha * 50), 4: 1 / (1j * 2 * math.pi * 4 * f0 * 2e-12)}
    for n, z in want.items():
        assert _one_port_z(nl, n * f0) == pytest.approx(z, rel=1e-8, abs=1e-8)
    assert abs(_one_port_z(nl, 3 * f0)) > 1e6  # open
    for n in (5, 6, CONFIRM_HARMONICS):  # the rest: a short
        assert abs(_one_port_z(nl, n * f0)) < 1e-6
    # above the realised harmonics the short is the capacitor C_HF: 0.1 Z0 at (H + 1) f0 and falling
    assert abs(_one_port_z(nl, (CONFIRM_HARMONICS + 1) * f0)) < 0.12 * 50
    with pytest.raises(ValueError, match="rest"):
        loadpull_netlist(make_loadpull_plan(dev, z0_ohm=50.0, f0_hz=f0, terms={1: "50+0j"}, rest="open"), 0)
    with pytest.raises(ValueError, match="no resistance at f0"):
        loadpull_netlist(make_loadpull_plan(dev, z0_ohm=50.0, f0_hz=f0, terms={1: "0+30j"}), 0)


@pytest.mark.ngspice
def test_class_b_optimum_confirmed_in_ngspice(tmp_path):
    # the class-B point (half sine into Ropt, harmonics shorted: pi/4, Cripps) solved per bin and run
    # in ngspice with the terminations built from parts: within the confirmation bound of 0.2 %
    import csv

    from netgen.studies.fast import CONFIRM_TOL
    from netgen.studies.loadpull_run import confirm_study

    dev = IdealDevice("current", 24.0, 2 * 24.0 / 50.0)
    # Z1 around 25 ohm, all below Ropt = 50 ohm: the drain stays above the knee
    plan = make_loadpull_plan(dev, z0_ohm=25.0, f0_hz=1e9, terms={1: "ring:0.3:3"})
    run_loadpull(plan, tmp_path)
    plan_b = make_loadpull_plan(dev, z0_ohm=50.0, f0_hz=1e9, terms={1: "50+0j"})
    assert plan_b.run(0)["drain_efficiency"] == pytest.approx(math.pi / 4, abs=0.003)  # the knee costs 0.2 points
    conf = confirm_study(plan, tmp_path, 1, seed=3)
    assert conf["confirmed"] == 2 and conf["flagged"] == 0 and conf["errors"] == 0
    assert conf["worst_pout_rel"] < CONFIRM_TOL and conf["worst_efficiency_rel"] < CONFIRM_TOL
    summary = loadpull_outputs(plan, tmp_path, plots=False)
    assert summary["best"]["confirmation"]["flagged"] is False
    with open(tmp_path / "loadpull.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert sorted(r["confirmation"] for r in rows) == ["", "confirmed", "confirmed"]
    assert {r["engine"] for r in rows} == {"loadpull"}
    # confirmed points are not run again
    assert confirm_study(plan, tmp_path, 0)["confirmed"] == 2


@pytest.mark.ngspice
@pytest.mark.slow
def test_class_f_and_class_j_points_confirmed_in_ngspice():
    # Raab's maximally flat class F current (even:2) with the third harmonic open (Raab, IEEE
    # Trans. MTT 2001), and a continuous class-J point (Cripps et al., IEEE MWCL 2009): the
    # solve and ngspice within 0.2 % in P1 and efficiency
    from netgen.studies.fast import disagreement
    from netgen.studies.loadpull_confirm import ngspice_point

    ropt = 50.0
    cases = [(IdealDevice("current", 24.0, 0.96, current="even:2"), {1: "60+0j", 3: "open"}),
             (IdealDevice("current", 24.0, 0.96), {1: f"{ropt}+{ropt}j", 2: f"0-{3 * math.pi / 8 * ropt}j"})]
    for dev, terms in cases:
        plan = make_loadpull_plan(dev, z0_ohm=ropt, f0_hz=1e9, terms=terms)
        full = ngspice_point(plan, 0)
        assert full["settled"]
        assert not disagreement(plan.run(0), full)["flagged"], terms


def test_opens_where_the_drive_current_has_no_component_are_named():
    # a half-wave rectified cosine has DC, f0 and even harmonics only (its Fourier series: any table
    # of Fourier series, common practice), so an open at 3 f0 or 5 f0 leaves that voltage to the
    # knee alone (docs/closure.md) and is named; an open at 2 f0 is not (the current has I2); the
    # switch's current follows its voltage, so nothing is named for it
    from netgen.studies import IdealDevice, free_open_harmonics, make_loadpull_plan

    dev = IdealDevice("current", 24.0, 0.8)

    def plan(device, terms):
        return make_loadpull_plan(device, z0_ohm=50.0, f0_hz=1e9, terms=terms, rest="short")

    assert free_open_harmonics(dev, plan(dev, {1: "grid:3", 3: "open"})) == [3]
    assert free_open_harmonics(dev, plan(dev, {1: "grid:3", 2: "open", 3: "20+5j"})) == []
    assert free_open_harmonics(dev, plan(dev, {1: "grid:3", 2: "ring:0.9:4", 3: "open", 5: "open"})) == [3, 5]
    switch = IdealDevice("switch", 24.0, 0.8)
    assert free_open_harmonics(switch, plan(switch, {1: "grid:3", 3: "open"})) == []
