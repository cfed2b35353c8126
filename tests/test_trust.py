"""Regression tests for numbers a designer must be able to trust (one section per defect).

Each test failed on the code before its fix; the physics it checks against is named beside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from netgen.design.records import SizedDesign, Waveforms
from netgen.design.schema import Design, DeviceSpec, SimSpec
from netgen.periodic import steady
from netgen.results.analysis import analyse

F0 = 1e9
VDD = 10.0
PPC = 1000


def _grid(periods=2, ppc=PPC):
    t = np.arange(periods * ppc) / (ppc * F0)
    return t, 2 * math.pi * F0 * t


def _sized(**device):
    d = Design(name="bench_trust", topology="class_e", f0_hz=F0, vdd_v=VDD, load_ohm=50.0,
               device=DeviceSpec(**device), sim=SimSpec(harmonics=3))
    return SizedDesign(design=d, ropt_ohm=50.0, components={})


# ------------------------------------------------ efficiency above 100 % (defect 3)

def test_judge_refuses_more_load_power_than_supply_power():
    # Energy conservation in a periodic state of a passive network (Tellegen's theorem, any
    # circuit-theory textbook): Pload <= Pdc. Flat series 0.1 % apart agree "to tolerance" but
    # the surplus is stored energy leaving the network.
    n = 40
    ok, why = steady.judge({"pdc_w": np.full(n, 100.0), "pload_w": np.full(n, 100.1)}, None, 1e-3, 6)
    assert not ok
    assert "energy stored in the network" in why


def test_analysis_withholds_an_efficiency_above_one():
    # Pout = 1.2 W from Pdc = 1 W: impossible in a periodic state (Tellegen's theorem), so it is no result
    t, th = _grid()
    vl = math.sqrt(2 * 1.2 * 50.0) * np.cos(th)
    wf = Waveforms(F0, t, {"drain": VDD + vl, "vdd": np.full_like(t, VDD), "load": vl},
                   {"drain": np.full_like(t, 0.1), "supply": np.full_like(t, 0.1)}, True, 20)
    m = analyse(wf, _sized(), "RLOAD load 0 50\n")
    assert m["pout_w"] == pytest.approx(1.2, rel=1e-6)
    assert m["drain_efficiency"] is None and m["pae"] is None
    assert m["settled"] is False
    assert any("more power" in w for w in m["warnings"])
