"""Sweeps, load circle, tolerance Monte Carlo, yield and executors (netgen.studies.plan, netgen.cli.studies).

The machinery tests use closed-form evaluators (module-level so that worker
processes can import them); the integration tests at the end run the real
pipeline in ngspice on tiny sweeps.
"""

from __future__ import annotations

import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from netgen.design.schema import design_from_dict
from netgen.errors import DesignError, SimulationError, SizingError
from netgen.design.quantities import parse_quantity
from netgen.studies.store import STORE_NAME, SweepStore
from netgen.studies.grammar import load_circle, metric_value, parse_spec
from netgen.studies.plan import make_plan, parse_tolerance, parse_vary, parse_vswr, point_passes, summarize, yield_interval
from netgen.studies.execute import run_sweep

TESTS = Path(__file__).resolve().parent

BASE = {
    "design": {"name": "sw_test", "topology": "class_b_tuned", "f0": "1 GHz", "vdd": "10 V",
               "ropt": "100 ohm", "load": "50 ohm"},
    "device": {"model": "gm"},
    "sim": {"points_per_cycle": 200, "min_cycles": 4, "max_cycles": 60, "harmonics": 3},
}


# ---------------------------------------------------------------- closed-form evaluators (test doubles)

def tuned_b_eval(design) -> dict:
    """Ideal tuned-load class B in closed form (Cripps, RF Power Amplifiers for Wireless
    Communications: efficiency pi/4, V1 = Vdd, Pout = Vdd^2 / (2 Ropt), peak 2 Vdd), degraded
    by tank detuning so that component tolerances change the result."""
    vals = design.network.values
    detune = 0.0
    if "tank_l" in vals and "tank_c" in vals:
        lh = parse_quantity(vals["tank_l"], "H", "tank_l")
        cf = parse_quantity(vals["tank_c"], "F", "tank_c")
        detune = 1.0 / (2 * math.pi * math.sqrt(lh * cf)) / design.f0_hz - 1.0
    vdd, r = design.vdd_v, design.ropt_ohm
    pout = vdd**2 / (2 * r) * (1 - 4 * detune**2)
    eff = math.pi / 4 * (1 - 2 * abs(detune))
    return {"design": {"name": design.name}, "settled": design.vdd_v < 30, "cycles": 10,
            "pdc_w": pout / eff, "pout_w": pout, "pload_total_w": pout, "drain_efficiency": eff, "pae": None,
            "peak_vd_v": 2 * vdd, "peak_vd_over_vdd": 2.0, "peak_id_a": 2 * vdd / r,
            "harmonics": [{"n": n, "pload_dbc": 0.0 if n == 1 else -40.0 - 10 * n} for n in (1, 2, 3)],
            "losses": {}, "bound": {}}


def failing_eval(design) -> dict:
    """Fails like the simulator at one supply value, like sizing at another; else tuned_b_eval."""
    if abs(design.vdd_v - 12.0) < 1e-9:
        raise SimulationError("ngspice: timestep too small", hint="lower points_per_cycle")
    if abs(design.vdd_v - 14.0) < 1e-9:
        raise SizingError("sizing refused this point")
    return tuned_b_eval(design)


def crashing_eval(design) -> dict:
    """Kills its worker process at Vdd = 12 V (as a simulator segfault would)."""
    if abs(design.vdd_v - 12.0) < 1e-9:
        os._exit(3)
    return tuned_b_eval(design)


def slow_eval(design) -> dict:
    """tuned_b_eval that takes a while, for the kill-and-resume test."""
    time.sleep(0.25)
    return tuned_b_eval(design)


# ---------------------------------------------------------------- grammar

def test_vary_linear_matches_numpy_linspace():
    var = parse_vary("design.vdd=20V:28V:5")
    assert_allclose(var.axis, np.linspace(20, 28, 5), rtol=1e-12)  # numpy.linspace, ends included
    assert var.sets[1] == {"design.vdd": "22 V"}
    assert var.unit == "V"


def test_vary_frequency_and_log_spacing():
    f = parse_vary("design.f0=850MHz:980MHz:14")
    assert_allclose(f.axis, np.linspace(850e6, 980e6, 14), rtol=1e-9)
    lg = parse_vary("network.feed_l=10nH:1uH:5:log")
    assert_allclose(lg.axis, np.geomspace(10e-9, 1e-6, 5), rtol=1e-9)  # numpy.geomspace
    assert_allclose(lg.axis[1] / lg.axis[0], 10 ** 0.5, rtol=1e-9)  # 2 decades in 4 equal ratios
    assert lg.sets[0] == {"network.feed_l": "1e-08 H"}


def test_vary_explicit_list_keeps_unit_text():
    var = parse_vary("design.vdd=20V,24V,28V")
    assert [s["design.vdd"] for s in var.sets] == ["20V", "24V", "28V"]
    assert_allclose(var.axis, [20, 24, 28])


def test_vary_text_and_int_keys():
    assert [s["design.topology"] for s in parse_vary("design.topology=class_f_line,class_e").sets] == ["class_f_line", "class_e"]
    assert [s["sim.points_per_cycle"] for s in parse_vary("sim.points_per_cycle=200:400:3").sets] == [200, 300, 400]


def test_vary_unit_mismatch_names_the_key():
    with pytest.raises(DesignError, match=r"^design\.vdd: '20mA' is in 'A' but this key takes V"):
        parse_vary("design.vdd=20mA:28mA:5")


@pytest.mark.parametrize("text, message", [
    ("design.vdx=1V:2V:3", r"'design\.vdx': unknown key; did you mean 'vdd'\?"),
    ("design.vdd=20V:28V:1", r"design\.vdd: a range needs at least 2 points"),
    ("design.vdd=20V:28V", r"design\.vdd: range '20V:28V' must be START:STOP:N"),
    ("network.feed_l=0nH:1uH:3:log", r"network\.feed_l: log spacing needs positive start and stop"),
    ("design.vdd", r"--vary 'design\.vdd': write PATH=START:STOP:N"),
    ("network.values=1,2", r"network\.values: cannot be varied as a whole"),
    ("design.topology=a:b:3", r"design\.topology: a text key cannot take a range"),
    ("network.values.tank_l=1nH:3pF:3", r"network\.values\.tank_l: start '1nH' and stop '3pF' need the same unit"),
])
def test_vary_errors(text, message):
    with pytest.raises(DesignError, match=message):
        parse_vary(text)


def test_plan_validates_values_against_design():
    with pytest.raises(DesignError, match=r"design\.vdd: -5 is out of range"):
        make_plan(BASE, vary=["design.vdd=-5V,10V"])


def test_grid_is_cartesian_product_last_axis_fastest():
    plan = make_plan(BASE, vary=["design.vdd=10V:12V:3", "design.load=40ohm,60ohm"])
    assert plan.n_points == 6
    got = [(plan.point(i)["axes"]["design.vdd"], plan.point(i)["axes"]["design.load"]) for i in range(6)]
    import itertools  # the standard library's product order is the reference
    assert got == list(itertools.product([10.0, 11.0, 12.0], [40.0, 60.0]))


def test_load_circle_has_the_requested_vswr():
    # scikit-rf's zl_2_swr / zl_2_Gamma0 as the outside reference (Pozar's definitions)
    from skrf.tlineFunctions import zl_2_Gamma0, zl_2_swr

    pts = load_circle(2.0, 12, 50.0)
    z = np.array([complex(r, x) for _, r, x in pts])
    assert_allclose(zl_2_swr(50.0, z), 2.0, rtol=1e-9)
    phase = np.degrees(np.angle(zl_2_Gamma0(50.0, z))) % 360
    assert_allclose(phase, np.arange(12) * 30.0, atol=1e-9)
    # phase 0: Z = S * RL = 100 ohm; phase 180: Z = RL / S = 25 ohm (Pozar)
    assert_allclose([z[0].real, z[6].real], [100.0, 25.0], rtol=1e-9)
    var = parse_vswr("2.0:12", 50.0)
    assert set(var.sets[3]) == {"design.load", "design.load_x"}
    with pytest.raises(DesignError, match="VSWR must be greater than 1"):
        parse_vswr("0.5:4", 50.0)


# ---------------------------------------------------------------- tolerance Monte Carlo

def test_tolerance_patterns():
    assert parse_tolerance("C*=5%").matches("tank_c", "C")
    assert not parse_tolerance("C*=5%").matches("tank_l", "L")
    assert parse_tolerance("tank_l=1%").matches("tank_l", "L")
    assert parse_tolerance("Z0*=3%").matches("line_z0", "Z0")
    assert not parse_tolerance("Z0*=3%").matches("line_td", "TD")
    # one naming: the component names of [network.values] (issue 13), wildcards on them
    assert parse_tolerance("*_l=1%").matches("tank_l", "L")
    assert not parse_tolerance("*_c=1%").matches("tank_l", "L")
    assert parse_tolerance("line_*=1%").matches("line_td", "TD")
    assert not parse_tolerance("L_tank=1%").matches("tank_l", "L")  # the old kind-prefixed form is gone
    with pytest.raises(DesignError, match="with a % sign"):
        parse_tolerance("C*=5")
    with pytest.raises(DesignError, match=r"'Q\*': matches no component; the components are feed_l"):
        make_plan(BASE, tolerance=["Q*=5%"], samples=3)


def test_monte_carlo_is_reproducible_from_the_seed():
    a = make_plan(BASE, tolerance=["C*=5%", "L*=2%"], samples=50, seed=7)
    b = make_plan(BASE, tolerance=["C*=5%", "L*=2%"], samples=50, seed=7)
    c = make_plan(BASE, tolerance=["C*=5%", "L*=2%"], samples=50, seed=8)
    assert [a.point(i) for i in range(50)] == [b.point(i) for i in range(50)]
    assert a.point(0)["scale"] != c.point(0)["scale"]
    # the factors are numpy's Generator stream (default_rng(seed).standard_normal) scaled by pct/3
    z = np.random.default_rng(7).standard_normal((50, len(a.components)))
    frac = np.array([0.05 if k == "C" else 0.02 for _, k in a.components])
    assert_allclose(a.factors, 1 + z * frac / 3, rtol=1e-15)


def test_monte_carlo_distributions():
    # normal: 5% is 3 sigma, so the sample std is 5%/3 (to about 1.5% relative at n = 20000)
    n = make_plan(BASE, tolerance=["tank_c=5%"], samples=20000, seed=3)
    assert_allclose(np.std(n.factors[:, 0]), 0.05 / 3, rtol=0.03)
    u = make_plan(BASE, tolerance=["tank_c=5%"], samples=20000, seed=3, dist="uniform")
    f = u.factors[:, 0]
    assert f.min() >= 0.95 and f.max() <= 1.05
    assert_allclose(np.std(f), 0.10 / math.sqrt(12), rtol=0.03)  # uniform on width w: std = w/sqrt(12)


def test_last_matching_tolerance_wins():
    p = make_plan(BASE, tolerance=["C*=5%", "tank_c=1%"], samples=4000, seed=2)
    names = [n for n, _ in p.components]
    std = np.std(p.factors, axis=0)
    assert_allclose(std[names.index("tank_c")], 0.01 / 3, rtol=0.08)
    assert_allclose(std[names.index("block_c")], 0.05 / 3, rtol=0.08)


# ---------------------------------------------------------------- specs and yield

def test_spec_parsing_and_metric_lookup():
    s = parse_spec("drain_efficiency>=70%")
    assert (s.metric, s.op, s.limit) == ("drain_efficiency", ">=", 0.70)
    m = {"drain_efficiency": 0.75, "settled": True, "harmonics": [{"pload_dbc": 0.0}, {"pload_dbc": -35.0}]}
    assert metric_value(m, "h2_dbc") == -35.0
    assert parse_spec("h2_dbc<=-30").check(m) and not parse_spec("h2_dbc<=-40").check(m)
    assert metric_value(m, "h5_dbc") is None
    with pytest.raises(DesignError, match=r"unknown metric 'drain_eff'; did you mean 'drain_efficiency'\?"):
        parse_spec("drain_eff>=0.7")


def test_not_settled_point_fails_its_specs():
    m = {"drain_efficiency": 0.9, "settled": False}
    assert not point_passes("not_settled", m, [parse_spec("drain_efficiency>=0.5")])
    assert not point_passes("failed", None, [])
    assert point_passes("ok", {**m, "settled": True}, [parse_spec("drain_efficiency>=0.5")])


@pytest.mark.parametrize("k, n", [(0, 20), (7, 20), (19, 20), (20, 20), (180, 200)])
def test_yield_interval_matches_scipy(k, n):
    from scipy.stats import binomtest

    # scipy.stats.binomtest(...).proportion_ci: 'exact' is Clopper-Pearson (1934), 'wilson' Wilson (1927)
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    assert_allclose(yield_interval(k, n), (ref.low, ref.high), rtol=1e-9, atol=1e-12)
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    assert_allclose(yield_interval(k, n, method="wilson"), (ref.low, ref.high), rtol=1e-9, atol=1e-12)


def test_yield_known_case():
    # 0 failures in n: the exact upper bound on the failure rate is 1 - (alpha/2)^(1/n)
    # ("rule of three" neighbourhood; Clopper-Pearson closed form for k = n)
    lo, hi = yield_interval(59, 59)
    assert hi == 1.0
    assert_allclose(lo, 0.025 ** (1 / 59), rtol=1e-12)


# ---------------------------------------------------------------- execution with closed-form evaluators

def _run(tmp_path, evaluator, workers=2, **plan_kw):
    plan = make_plan(BASE, **plan_kw)
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        counts = run_sweep(plan, st, sid, workers=workers, evaluator=evaluator)
        rows = list(st.rows(sid))
    return plan, counts, rows


def test_failed_points_are_recorded_and_the_sweep_finishes(tmp_path):
    plan, counts, rows = _run(tmp_path, failing_eval, vary=["design.vdd=10V:16V:4"])
    assert [r["status"] for r in rows] == ["ok", "failed", "failed", "ok"]
    assert rows[1]["error"].startswith("SimulationError: ngspice: timestep too small Hint: lower points_per_cycle")
    assert rows[2]["error"] == "SizingError: sizing refused this point"
    assert counts == {"ran": 4, "skipped": 0, "failed": 2, "lost": 0, "retried": 0, "lost_left": 0}
    # P = Vdd^2/(2 Ropt) for the tuned-load reference (Cripps)
    assert_allclose(rows[3]["metrics"]["pout_w"], 16.0**2 / 200, rtol=1e-12)


def test_design_error_at_a_point_is_recorded(tmp_path):
    # each value is valid alone; min_cycles 50 with max_cycles 40 is not: that point fails, the sweep goes on
    plan, counts, rows = _run(tmp_path, tuned_b_eval, workers=1, vary=["sim.min_cycles=4,50", "sim.max_cycles=60,40"])
    assert [r["status"] for r in rows] == ["ok", "ok", "ok", "failed"]
    assert rows[3]["error"] == ("DesignError: sim.min_cycles: larger than sim.max_cycles; "
                                "lower min_cycles or raise max_cycles.")
    # a value that is wrong on its own is refused before anything runs
    with pytest.raises(DesignError, match="sim.min_cycles: larger than sim.max_cycles"):
        make_plan(BASE, vary=["sim.min_cycles=4,100"])


def test_worker_crash_is_isolated(tmp_path):
    plan, counts, rows = _run(tmp_path, crashing_eval, vary=["design.vdd=10V,11V,12V,13V,14V"])
    assert [r["status"] for r in rows] == ["ok", "ok", "failed", "ok", "ok"]
    assert rows[2]["error"].startswith("WorkerCrash")


def test_not_settled_status_and_summary(tmp_path):
    plan, counts, rows = _run(tmp_path, tuned_b_eval, workers=1, vary=["design.vdd=20V,30V"])
    assert [r["status"] for r in rows] == ["ok", "not_settled"]
    s = summarize(rows, [parse_spec("drain_efficiency>=0.7")], plan.n_points)
    assert (s["passed"], s["stored"], s["specs"]) == (1, 2, {"drain_efficiency>=0.7": 1})


def test_monte_carlo_metrics_do_not_depend_on_worker_count(tmp_path):
    kw = dict(tolerance=["C*=5%", "L*=2%"], samples=6, seed=11)
    _, _, one = _run(tmp_path / "a", tuned_b_eval, workers=1, **kw)
    _, _, two = _run(tmp_path / "b", tuned_b_eval, workers=2, **kw)
    _, _, other = _run(tmp_path / "c", tuned_b_eval, workers=1, tolerance=kw["tolerance"], samples=6, seed=12)
    assert [(r["inputs"], r["metrics"]) for r in one] == [(r["inputs"], r["metrics"]) for r in two]
    assert [r["metrics"]["drain_efficiency"] for r in one] != [r["metrics"]["drain_efficiency"] for r in other]
    # the overrides written are the nominal sized value times the factor
    from netgen.synthesis.sizing import size

    nominal = size(design_from_dict(BASE)).value("tank_c")
    r0 = one[0]["inputs"]
    assert_allclose(parse_quantity(r0["values"]["tank_c"], "F", "v"), nominal * r0["scale"]["tank_c"], rtol=1e-9)


def test_grid_plot_data_equal_the_database(tmp_path):
    from netgen.studies.plots import grid_data, plot_sweep

    plan, _, rows = _run(tmp_path, tuned_b_eval, workers=1, vary=["design.vdd=10V:14V:3", "design.ropt=80ohm,100ohm"])
    xs, ys, z = grid_data(rows, "design.vdd", "design.ropt", "pout_w")
    con = sqlite3.connect(tmp_path / STORE_NAME)
    for idx, pout, inputs in con.execute("SELECT idx, pout_w, inputs FROM points"):
        ax = json.loads(inputs)["axes"]
        j, i = list(ys).index(ax["design.ropt"]), list(xs).index(ax["design.vdd"])
        assert z[j, i] == pout
    assert_allclose(z, (xs[None, :] ** 2) / (2 * ys[:, None]), rtol=1e-12)  # Vdd^2/(2R), Cripps
    made = plot_sweep(tmp_path / STORE_NAME, tmp_path)
    assert {"grid_drain_efficiency", "grid_pout_w"} <= set(made)
    assert all(Path(p).stat().st_size > 1000 for p in made.values())


def test_line_and_circle_plot_data_equal_the_database(tmp_path):
    from netgen.studies.plots import circle_data, line_data, plot_sweep

    plan, _, rows = _run(tmp_path, tuned_b_eval, workers=1, vswr="3.0:8")
    x, y = line_data(rows, "load_phase_deg", "drain_efficiency")
    con = sqlite3.connect(tmp_path / STORE_NAME)
    db = [e for (e,) in con.execute("SELECT drain_efficiency FROM points ORDER BY idx")]
    assert_allclose(x, np.arange(8) * 45.0) and list(y) == db
    c = circle_data(rows, 50.0)
    assert_allclose(np.abs(c["gamma"]), 0.5, rtol=1e-9)  # |Gamma| = (S-1)/(S+1) = 0.5 for S = 3 (Pozar)
    assert_allclose(np.degrees(np.angle(c["gamma"])) % 360, x, atol=1e-7)
    assert list(c["drain_efficiency"]) == db
    made = plot_sweep(tmp_path / STORE_NAME, tmp_path)
    assert set(made) == {"load_circle", "line_load_phase_deg"}


def stressed_eval(design) -> dict:
    """tuned_b_eval with its device stress: drain voltage Vdd (1 + cos) between 0 and 2 Vdd, and
    the dissipation Pdc - Pout = Pout (4/pi - 1) at efficiency pi/4 (Cripps, as above)."""
    out = tuned_b_eval(design)
    out.update(min_vd_v=0.0, device_dissipation_w=out["pdc_w"] - out["pout_w"])
    return out


def test_load_circle_plot_draws_the_stress_of_the_database(tmp_path, monkeypatch):
    # issue 13: min and peak drain voltage, peak drain current and device dissipation of every
    # load appear on the load-circle plot (a panel each), the worst named in the titles
    from netgen.studies import plots

    plan, _, rows = _run(tmp_path, stressed_eval, workers=1, vswr="3.0:8")
    c = plots.circle_data(rows, 50.0)
    con = sqlite3.connect(tmp_path / STORE_NAME)
    for key in plots.CIRCLE_STRESS:  # the store's own columns
        db = [v for (v,) in con.execute(f"SELECT {key} FROM points ORDER BY idx")]
        assert list(c[key]) == db, key
    assert_allclose(c["phase_deg"], np.arange(8) * 45.0)
    seen = {}

    def keep(fig, path):
        seen["titles"] = [ax.get_title() for ax in fig.axes]
        seen["lines"] = {line.get_label(): line.get_ydata() for ax in fig.axes for line in ax.get_lines()}
        plt.close(fig)
        return Path(path)

    import matplotlib.pyplot as plt

    monkeypatch.setattr(plots, "_save", keep)
    plots.plot_load_circle(rows, 50.0, tmp_path / "lc.png", vdd_v=10.0)
    peak = 2 * 10.0  # 2 Vdd (Cripps), BASE has Vdd = 10 V
    assert any(t.startswith(f"drain voltage: peak {peak:.3g} V at 0 deg,\nmin 0 V at 0 deg") for t in seen["titles"])
    assert any(t.startswith("peak current ") and "dissipation " in t for t in seen["titles"])
    assert_allclose(seen["lines"]["peak drain voltage"], peak)
    assert_allclose(seen["lines"]["device dissipation"], c["device_dissipation_w"])


def test_load_circle_with_another_axis_draws_a_stress_line_per_value(tmp_path, monkeypatch):
    # --vswr with --vary design.vdd: each Vdd is a line of its own against the load phase (one line
    # through both zigzagged between them), and the reflection plane shows the highest point at
    # each load; peak drain voltage 2 Vdd (Cripps) tells the lines apart
    import matplotlib.pyplot as plt
    from matplotlib.collections import PathCollection

    from netgen.studies import plots

    plan, _, rows = _run(tmp_path, stressed_eval, workers=1, vswr="3.0:4", vary=["design.vdd=10V,12V"])
    seen = {}

    def keep(fig, path):
        seen["titles"] = [ax.get_title() for ax in fig.axes]
        seen["lines"] = {line.get_label(): (line.get_xdata(), line.get_ydata()) for ax in fig.axes
                         for line in ax.get_lines()}
        dots = [c for ax in fig.axes for c in ax.collections if isinstance(c, PathCollection)]  # the scatters
        seen["scatter"] = [np.asarray(c.get_offsets()) for c in dots]
        seen["colours"] = [np.asarray(c.get_array()) for c in dots]
        plt.close(fig)
        return Path(path)

    monkeypatch.setattr(plots, "_save", keep)
    plots.plot_load_circle(rows, 50.0, tmp_path / "lc.png", vdd_v=10.0)
    for vdd in (10, 12):
        x, y = seen["lines"][f"peak drain voltage, design.vdd={vdd}"]
        assert_allclose(x, [0.0, 90.0, 180.0, 270.0])  # sorted by phase, one value each
        assert_allclose(y, 2.0 * vdd)
    assert any(t.startswith("drain voltage: peak 24 V at 0 deg (design.vdd=12)") for t in seen["titles"])
    assert len(seen["scatter"]) == 2 and all(len(xy) == 4 for xy in seen["scatter"])  # four loads, not eight stacked points
    eff = plots.circle_data(rows, 50.0)["drain_efficiency"]
    assert_allclose(seen["colours"][0], 100.0 * np.nanmax(eff))  # tuned load: pi/4 at every load and Vdd
    assert any("the highest of 2 points at each load" in t for t in seen["titles"])


def test_flat_metric_is_drawn_flat(tmp_path, monkeypatch):
    # Efficiency of a switch into a linear network does not move with Vdd (superposition, common
    # practice): the value axis must then show a flat line over a sensible span, not the last
    # digits of the simulator magnified by an offset.
    import matplotlib.pyplot as plt

    import netgen.studies.plots as sp

    rows = [{"status": "ok", "inputs": {"axes": {"design.vdd": v}},
             "metrics": {"drain_efficiency": 0.8020354 + 1e-12 * k, "pout_w": 0.01 * v * v,
                         "peak_vd_over_vdd": 2.17, "h2_dbc": -29.9, "h3_dbc": -31.0}}
            for k, v in enumerate((20.0, 22.0, 24.0))]
    drawn = {}
    monkeypatch.setattr(sp, "_save", lambda fig, path: drawn.setdefault("fig", fig) and path)
    sp.plot_line(rows, "design.vdd", tmp_path / "line.png", "V")
    axes = drawn["fig"].axes
    lo, hi = axes[0].get_ylim()
    assert hi - lo >= sp.MIN_SPAN["drain_efficiency"] and lo < 80.2 < hi
    assert axes[0].yaxis.get_major_formatter().get_offset() == ""
    lo, hi = axes[1].get_ylim()  # Pout moves 4.0 -> 5.76 W: drawn over its own range
    assert hi - lo < 2.5
    plt.close(drawn["fig"])


def test_resume_runs_only_missing_points(tmp_path):
    plan = make_plan(BASE, vary=["design.vdd=10V:13V:4"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        st.record(sid, 2, plan.point(2), "ok", {"settled": True, "pout_w": -1.0}, None, 0.0)
        counts = run_sweep(plan, st, sid, workers=1, evaluator=tuned_b_eval)
        rows = list(st.rows(sid))
    assert counts["skipped"] == 1 and counts["ran"] == 3
    assert [r["idx"] for r in rows] == [0, 1, 2, 3]
    assert rows[2]["metrics"]["pout_w"] == -1.0  # the stored point was not run again


# ---------------------------------------------------------------- CLI, kill and resume

def _design_file(tmp_path, extra: str = "") -> Path:
    p = tmp_path / "pa.toml"
    p.write_text(
        '[design]\nname = "sw_test"\ntopology = "class_b_tuned"\nf0 = "1 GHz"\nvdd = "10 V"\n'
        'ropt = "100 ohm"\nload = "50 ohm"\n[device]\nmodel = "gm"\n[sim]\npoints_per_cycle = 200\nmin_cycles = 4\n'
        'max_cycles = 60\nharmonics = 3\n' + extra, encoding="utf-8")
    return p


def _cli(args, env_extra: dict | None = None, **kw):
    env = dict(os.environ, PYTHONPATH=str(TESTS) + os.pathsep + os.environ.get("PYTHONPATH", ""), **(env_extra or {}))
    return subprocess.Popen([sys.executable, "-m", "netgen.cli", "sweep", *args], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw)


def test_kill_and_resume(tmp_path):
    design = _design_file(tmp_path)
    out = tmp_path / "out"
    args = [str(design), "--vary", "design.vdd=10V:20V:12", "--vary", "design.ropt=90ohm,110ohm",
            "-o", str(out), "--workers", "2", "--quiet", "--no-plots", "--evaluator", "test_sweep:slow_eval"]
    proc = _cli(args, start_new_session=True)
    db = out / STORE_NAME
    n = 0
    while proc.poll() is None:
        if db.exists():
            try:
                with sqlite3.connect(db) as con:
                    n = con.execute("SELECT COUNT(*) FROM points").fetchone()[0]
            except sqlite3.OperationalError:
                n = 0
            if n >= 3:
                break
        time.sleep(0.05)
    assert proc.poll() is None, "the sweep ended before it could be interrupted"
    os.killpg(proc.pid, signal.SIGKILL)  # the CLI and its workers, as a crash or power cut would
    proc.wait()
    with sqlite3.connect(db) as con:
        partial = con.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    assert 3 <= partial < 24
    proc = _cli(args)
    stdout, stderr = proc.communicate()
    assert proc.returncode == 0, stderr
    assert f"({partial} already stored, {24 - partial} run now)" in stdout
    with sqlite3.connect(db) as con:
        assert con.execute("SELECT COUNT(*), COUNT(DISTINCT idx), MIN(idx), MAX(idx) FROM points").fetchone() == (24, 24, 0, 23)
        assert con.execute("SELECT COUNT(*) FROM points WHERE status = 'ok'").fetchone()[0] == 24
    # a changed variation against the same store is refused
    proc = _cli([*args[:2], "design.vdd=10V:20V:6", *args[3:]])
    _, stderr = proc.communicate()
    assert proc.returncode == 2
    assert "holds a sweep with different variations" in stderr


def test_cli_monte_carlo_summary_and_csv(tmp_path):
    design = _design_file(tmp_path)
    out = tmp_path / "mc"
    proc = _cli([str(design), "--tolerance", "C*=5%", "--tolerance", "L*=2%", "--samples", "12", "--seed", "1",
                 "--spec", "drain_efficiency>=0.70", "-o", str(out), "--workers", "1", "--quiet",
                 "--evaluator", "test_sweep:tuned_b_eval"])
    stdout, stderr = proc.communicate()
    assert proc.returncode == 0, stderr
    rows = list(SweepStore(out / STORE_NAME).rows(1))
    k = sum(point_passes(r["status"], r["metrics"], [parse_spec("drain_efficiency>=0.70")]) for r in rows)
    lo, hi = yield_interval(k, 12)
    assert f"yield {100 * k / 12:.1f}% ({k}/12), 95% interval {100 * lo:.1f}%..{100 * hi:.1f}%" in stdout
    import csv

    with open(out / "sweep.csv", newline="") as fh:
        table = list(csv.DictReader(fh))
    assert len(table) == 12 and "values.tank_c [F]" in table[0]
    assert (out / "histograms.png").stat().st_size > 1000
    summary = json.loads((out / "summary.json").read_text())
    assert summary["passed"] == k


def test_cli_unit_error_is_one_line(tmp_path):
    design = _design_file(tmp_path)
    proc = _cli([str(design), "--vary", "design.f0=850MV:980MV:3", "-o", str(tmp_path / "x")])
    _, stderr = proc.communicate()
    assert proc.returncode == 2
    assert stderr.strip() == "Error: design.f0: '850MV' is in 'V' but this key takes Hz; write e.g. \"915 MHz\"."


# ---------------------------------------------------------------- Dask

@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("distributed")  # a declared dependency: always present in CI
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None, silence_logs=40)
    yield cluster.scheduler_address
    cluster.close()


def test_dask_cluster_gives_the_same_points_as_local_processes(tmp_path, dask_cluster):
    plan = make_plan(BASE, vary=["design.vdd=10V:16V:4"], tolerance=["C*=5%"], samples=2, seed=5)
    out = {}
    for name, kw in (("local", {"workers": 2}), ("dask", {"cluster": dask_cluster})):
        with SweepStore(tmp_path / name / STORE_NAME) as st:
            sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
            run_sweep(plan, st, sid, evaluator=failing_eval, **kw)
            out[name] = [(r["idx"], r["inputs"], r["status"], r["metrics"], r["error"]) for r in st.rows(sid)]
    assert len(out["dask"]) == 8
    assert out["dask"] == out["local"]
    assert [s for _, _, s, _, _ in out["dask"]] == ["ok", "ok", "failed", "failed", "failed", "failed", "ok", "ok"]


# ---------------------------------------------------------------- the real pipeline (ngspice)

REAL = {
    "design": {"name": "sw_real", "topology": "class_f_line", "f0": "1 GHz", "vdd": "10 V",
               "ropt": "100 ohm", "load": "50 ohm"},
    "device": {"model": "switch"},
    # a lossless line: its modes near the odd harmonics decay slowly, and the harmonic impedances
    # must settle too (netgen.periodic.steady), so allow more cycles than a lossy design needs
    "sim": {"points_per_cycle": 200, "min_cycles": 10, "max_cycles": 1500, "harmonics": 3},
}


@pytest.mark.ngspice
def test_real_vdd_sweep_power_scales_with_vdd_squared(tmp_path):
    # A switch (resistance switched by time, not by voltage) into a fixed linear network is a linear
    # circuit: every voltage scales with Vdd, so Pout ~ Vdd^2 and the efficiency does not change
    # (superposition, common practice). At 10 V the ideal class-F power is 8 Vdd^2 / (pi^2 Ropt)
    # = 0.8106 W (Raab 1997; docs/check_values.md), approached within the Ron = 0.2 ohm loss.
    plan = make_plan(REAL, vary=["design.vdd=5V,10V,20V"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        run_sweep(plan, st, sid, workers=2, wave_dir=tmp_path / "waves")
        rows = list(st.rows(sid))
    assert [r["status"] for r in rows] == ["ok"] * 3, [r["error"] for r in rows]
    # --keep-waveforms: each point's settled waveforms; the supply node sits at that point's Vdd
    for idx, vdd in enumerate((5.0, 10.0, 20.0)):
        table = np.genfromtxt(tmp_path / "waves" / f"point_{idx:06d}.csv", delimiter=",", names=True)
        assert_allclose(np.mean(table["v_vdd_v"]), vdd, rtol=1e-6)
    p = np.array([r["metrics"]["pout_w"] for r in rows])
    eff = np.array([r["metrics"]["drain_efficiency"] for r in rows])
    assert_allclose(p / p[1], [0.25, 1.0, 4.0], rtol=0.02)
    assert_allclose(eff, eff[1], rtol=0.02)
    assert_allclose(p[1], 8 * 10.0**2 / (math.pi**2 * 100.0), rtol=0.03)
    assert 0.95 < eff[1] <= 1.0  # ideal class F: 100 % (Raab 1997)


@pytest.mark.ngspice
@pytest.mark.slow
def test_real_pipeline_local_and_dask_identical(tmp_path, dask_cluster):
    plan = make_plan(REAL, tolerance=["C*=5%", "Z0*=3%"], samples=2, seed=1)
    got = {}
    for name, kw in (("local", {"workers": 2}), ("dask", {"cluster": dask_cluster})):
        with SweepStore(tmp_path / name / STORE_NAME) as st:
            sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
            run_sweep(plan, st, sid, **kw)
            got[name] = [(r["inputs"], r["status"], r["metrics"]) for r in st.rows(sid)]
    assert [s for _, s, _ in got["local"]] != ["failed"] * 2
    assert got["dask"] == got["local"]  # same inputs, same simulator, same numbers: executor does not matter


@pytest.mark.ngspice
def test_real_sizing_failure_is_recorded(tmp_path):
    # class E needs Cout below the shunt C = 0.1836/(omega R) (Sokal & Sokal 1975; here about 0.29 pF
    # at 1 GHz and 100 ohm): 1 pF cannot be realised and that point fails; the other runs.
    doc = json.loads(json.dumps(REAL))
    doc["design"]["topology"] = "class_e"
    plan = make_plan(doc, vary=["device.cout=0F,1pF"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        run_sweep(plan, st, sid, workers=2)
        rows = list(st.rows(sid))
    assert rows[0]["status"] in ("ok", "not_settled"), rows[0]["error"]
    assert rows[1]["status"] == "failed" and rows[1]["error"].startswith("SizingError")


def test_unreachable_cluster_is_a_clear_error(tmp_path):
    from netgen.errors import NetgenError

    plan = make_plan(BASE, vary=["design.vdd=10V,11V"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        with pytest.raises(NetgenError, match=r"^--cluster tcp://127\.0\.0\.1:9: cannot reach the Dask scheduler"):
            run_sweep(plan, st, sid, cluster="tcp://127.0.0.1:9", evaluator=tuned_b_eval, cluster_timeout_s=1.0)
        assert st.done_indices(sid) == set()


def test_cli_list_prints_points_without_running(tmp_path):
    design = _design_file(tmp_path)
    proc = _cli([str(design), "--vary", "design.vdd=10V:12V:3", "--vswr", "2:2", "--list", "-o", str(tmp_path / "l")])
    stdout, stderr = proc.communicate()
    assert proc.returncode == 0, stderr
    lines = stdout.strip().splitlines()
    assert len(lines) == 6
    first = json.loads(lines[0].split("\t", 1)[1])
    # phase 0 on the VSWR-2 circle: Z = 2 RL = 100 ohm (Pozar)
    assert first["set"] == {"design.vdd": "10 V", "design.load": "100 ohm", "design.load_x": "0 ohm"}
    assert not (tmp_path / "l").exists()


def test_cli_reports_failures_and_exits_zero(tmp_path):
    design = _design_file(tmp_path)
    proc = _cli([str(design), "--vary", "design.vdd=10V:16V:4", "-o", str(tmp_path / "f"), "--workers", "1",
                 "--quiet", "--no-plots", "--evaluator", "test_sweep:failing_eval"])
    stdout, stderr = proc.communicate()
    assert proc.returncode == 0, stderr
    assert "4 points: 2 ok, 0 not settled, 2 failed (0 already stored, 4 run now)." in stdout
    assert ("  point 1 failed: SimulationError: ngspice: timestep too small Hint: lower points_per_cycle "
            "(and 1 more; see the error column of sweep.csv)") in stdout


# ---------------------------------------------------------------- a built network stays built

def test_operating_point_sweeps_keep_the_nominal_network():
    # A bench measurement of a built amplifier changes the supply or the drive frequency, not the
    # parts (common practice): a frequency sweep must not re-tune the network to each frequency.
    from netgen.synthesis.sizing import size
    from netgen.studies.execute import _point_design

    nominal = size(design_from_dict(BASE))
    plan = make_plan(BASE, vary=["design.f0=0.9GHz,1.1GHz"])
    for idx in range(plan.n_points):
        design, _ = _point_design(plan.base_doc, None, plan.point(idx))
        sized = size(design)
        for name, comp in nominal.components.items():
            assert sized.components[name].value == pytest.approx(comp.value, rel=1e-9), name
    # asked for, or when a sizing input is swept, every point is sized anew
    for plan in (make_plan(BASE, vary=["design.f0=0.9GHz,1.1GHz"], resize=True),
                 make_plan(BASE, vary=["design.ropt=80ohm,120ohm"])):
        design, _ = _point_design(plan.base_doc, None, plan.point(0))
        assert size(design).components["tank_l"].value != pytest.approx(nominal.components["tank_l"].value, rel=1e-3)


def _validated_anew(plan, idx):
    """A tolerance point built the long way: the nominal sized, every scaled value written into the
    document, the document validated again (what the sweep did before the nominal was kept)."""
    from netgen.design import COMPONENT_UNITS, set_dotted
    from netgen.studies.grammar import format_value
    from netgen.synthesis.sizing import size

    p = plan.point(idx)
    doc = plan.base_doc
    for path, value in p["set"].items():
        doc = set_dotted(doc, path, value)
    sized = size(design_from_dict(doc))
    for name, factor in p["scale"].items():
        comp = sized.components[name]
        doc = set_dotted(doc, f"network.values.{name}", format_value(comp.value * factor, COMPONENT_UNITS[comp.kind]))
    return design_from_dict(doc)


def test_tolerance_points_are_sized_once_and_equal_the_validated_design(monkeypatch):
    # the nominal network of a grid point is validated and sized once per process; each sample's
    # design must still be exactly the design the validation of its own document gives
    from netgen.studies import execute
    from netgen.synthesis.sizing import size

    calls = []

    monkeypatch.setattr(execute, "_NOMINAL", type(execute._NOMINAL)())
    plan = make_plan(BASE, vary=["design.vdd=9V,11V"], tolerance=["C*=5%", "L*=5%"], samples=4, seed=2)
    for idx in range(plan.n_points):
        design, applied = execute._point_design(plan.base_doc, None, plan.point(idx),
                                                lambda d: calls.append(1) or size(d))
        want = _validated_anew(plan, idx)
        assert design == want  # every field but the raw document and the source
        assert design.raw == want.raw
        assert set(applied) == set(plan.point(idx)["scale"])
    assert len(calls) == 2  # one sizing per grid point (two supplies), not one per sample


def test_tolerance_point_scaling_a_design_key_is_validated_anew():
    from netgen.studies.execute import _point_design

    plan = make_plan(BASE, tolerance=["design.vdd=50%"], samples=200, seed=1, dist="uniform")
    seen = [_point_design(plan.base_doc, None, plan.point(i))[0].vdd_v for i in range(5)]
    assert all(5.0 <= v <= 15.0 for v in seen) and len(set(seen)) == 5
    # a key scaled out of its range is refused with the key's own message (validation ran)
    with pytest.raises(DesignError, match="design.vdd"):
        _point_design(plan.base_doc, None, {**plan.point(0), "scale": {"design.vdd": -1.0}})


def test_plain_json_is_the_json_round_trip():
    # the reference is the standard library's own round trip (json.loads(json.dumps(x)))
    from netgen.studies.execute import plain_json

    obj = {"a": np.float64(1.5), "b": [np.int64(3), (1, 2.5)], "c": np.array([[1.0, np.nan], [np.inf, -0.0]]),
           "d": {1: "one", 2.5: True, None: None, False: np.bool_(False)}, "e": complex(1, 2), "f": float("nan"),
           "g": np.float32(0.1)}
    want = json.loads(json.dumps(obj, default=lambda o: o.tolist() if isinstance(o, np.ndarray)
                                 else o.item() if isinstance(o, np.generic) else str(o)))
    got = plain_json(obj)
    assert json.dumps(got, sort_keys=True) == json.dumps(want, sort_keys=True)
    assert type(got["a"]) is float and type(got["b"][0]) is int and type(got["d"]["false"]) is bool
