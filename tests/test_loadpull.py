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
                                "--no-plots", "-o", tmp_path / "lp")
    assert code == 0, err
    assert "efficiency optimum" in out
    code, out, err = netgen_cli("loadpull", path, "--z2", "ring:2:4", "-o", tmp_path / "lp2")
    assert code == 2 and err.startswith("Error: --z2") and "Traceback" not in err
