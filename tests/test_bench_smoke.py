"""The benchmark helpers (bench/common.py) on known answers, and a smoke run of bench/run_all.py --quick.

The smoke run asserts the structure and the physics sanity of what it measures, never a time.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

BENCH = Path(__file__).resolve().parent.parent / "bench"
sys.path.insert(0, str(BENCH))

import common  # noqa: E402  (bench/common.py)


def test_cycle_powers_of_a_sine_and_a_dc_current():
    # A sine of amplitude A into R carries A^2/(2R) (textbook RMS power); all of it is fundamental.
    # The supply current is DC: Pdc = Vdd * I. ngspice's branch current is negative when the
    # source delivers power (ngspice manual, voltage-source current convention).
    f0, amp, r, vdd, idc = 1e9, 7.0, 50.0, 24.0, 0.25
    T = 1 / f0
    t = np.linspace(0, 3 * T, 3001)
    v = amp * np.sin(2 * np.pi * f0 * t + 0.3)
    i = -idc * np.ones_like(t)
    pdc, p1, pload = common.cycle_powers(t, v, i, t0_s=T, period_s=T, vdd_v=vdd, rload_ohm=r)
    assert pdc == pytest.approx(vdd * idc, rel=1e-12)
    assert p1 == pytest.approx(amp ** 2 / (2 * r), rel=1e-4)
    assert pload == pytest.approx(amp ** 2 / (2 * r), rel=1e-4)


def test_cycle_powers_of_a_square_wave_fundamental():
    # Fourier series of a +-1 square wave: fundamental amplitude 4/pi (textbook).
    T = 1.0
    t = np.linspace(0, 2, 200001)
    v = np.where((t % 1.0) < 0.5, 1.0, -1.0)
    _, p1, pload = common.cycle_powers(t, v, np.zeros_like(t), t0_s=0.0, period_s=T, vdd_v=1.0, rload_ohm=1.0,
                                       points=4096)
    assert p1 == pytest.approx((4 / math.pi) ** 2 / 2, rel=1e-3)
    assert pload == pytest.approx(1.0, rel=1e-3)


def test_cycles_to_tol_of_an_exponential_decay():
    # x_k = 1 + a exp(-k / tau) (k = 0-based cycle) is within tol of 1 once a exp(-k/tau) <= tol,
    # i.e. from k* = ceil(tau ln(a / tol)); 1-based, that is k* + 1 cycles simulated.
    tau, a, tol = 37.0, 0.2, 1e-3
    k = np.arange(3000)
    x = 1 + a * np.exp(-k / tau)
    expected = math.ceil(tau * math.log(a / tol)) + 1
    assert common.cycles_to_tol({"x": x}, tol, final={"x": 1.0}) == expected
    # still outside at the end: no answer
    assert common.cycles_to_tol({"x": x[:100]}, tol, final={"x": 1.0}) is None
    # the slower of two series decides
    y = 1 - 0.5 * np.exp(-k / 10.0)
    assert common.cycles_to_tol({"x": x, "y": y}, tol, final={"x": 1.0, "y": 1.0}) == expected


def test_converged_value_is_a_long_tail_mean():
    # A run that holds its level but ends on a short excursion (a 10-cycle wander of 0.105 %, as
    # the lossless-line designs show): the mean of a stationary series' last n values estimates
    # its level with an error falling as 1/sqrt(n) (common statistics), so the reference is the
    # mean of the last 100 cycles, and the run counts as settled from its first cycle.
    x = np.ones(1000)
    x[-10:] = 1.00105
    assert common.reference_tail(1000) == 100
    assert common.reference_tail(3000) == 100
    assert common.reference_tail(60) == 10  # short smoke runs: at most a tenth, at least 10
    assert common.cycles_to_tol({"x": x}, 1e-3) == 1
    # a 10-cycle reference would call the same run unsettled until its last 10 cycles
    assert common.cycles_to_tol({"x": x}, 1e-3, tail=10) == 991


def test_tran_line_edits():
    net = "title\nR1 a 0 1\n.tran 1e-12 1e-07 0 1e-12 uic\n.end\n"
    assert ".tran 1e-12 1e-07 0 1e-12\n" in common.plain_tran(net)
    assert "uic" not in common.plain_tran(net)
    assert ".tran 1e-12 5e-06 0 1e-12 uic" in common.set_tstop(net, 5e-6)


@pytest.mark.ngspice
@pytest.mark.slow
def test_quick_benchmark_run(tmp_path):
    import run_all

    out = tmp_path / "results.json"
    assert run_all.main(["--quick", "--no-sweep", "--out", str(out)]) == 0
    res = json.loads(out.read_text())
    assert res["quick"] is True
    assert res["machine"]["ngspice_version"]
    names = [r["design"] for r in res["designs"]]
    assert names == [n for n, _, _ in run_all.QUICK_PLAN]
    for r in res["designs"]:
        ng, nv = r["netgen"], r["naive"]
        assert ng["cycles"] > 0 and ng["seconds"] > 0
        # powers are physical: 0 < P1 <= Pdc (a passive network cannot deliver more than it draws)
        assert 0 < nv["ref_p1_w"] <= nv["ref_pdc_w"]
        assert 0 < ng["p1_w"] <= ng["pdc_w"]
        assert nv["cycles_run"] > 0
    o = res["overhead"]
    assert o["shared_median_s"] > 0 and o["batch_median_s"] > 0
    assert "large_choke" in res["bias_networks"]
    assert set(res["targets_met"]) >= {"ratio", "efficiency", "warm_cycles"}
