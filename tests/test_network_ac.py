"""Drain impedance: ngspice AC of the rendered netlist vs netgen.synthesis.network.z_drain vs scikit-rf.

ngspice runs through netgen.simulator.engine.run_ac (batch path: the ngspice executable).
The scikit-rf networks are built here from the sized values with skrf's own element,
line and shunt primitives (independent of netgen.synthesis.network's ABCD code).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf
from numpy.testing import assert_allclose
from skrf.media import DefinedGammaZ0

from netgen.design.schema import design_from_dict, load_design
from netgen.simulator.engine import run_ac
from netgen.synthesis.losses import line_loss_net, loss_net
from netgen.synthesis.network import abcd_drain_to_load, abcd_tline, line_plan, z_drain, z_in, z_intrinsic
from netgen.netlist.renderer import render
from netgen.synthesis.sizing import size
from netgen.synthesis.topologies import TOPOLOGY_REGISTRY

SIMS = Path(__file__).resolve().parents[1] / "sims"
C0 = 299_792_458.0
HARM = np.arange(1, 6)


# ------------------------------------------------------------ scikit-rf model

class SkrfModel:
    """Builds the topologies with scikit-rf primitives; port impedance 50 ohm."""

    def __init__(self, sized, f_hz):
        self.s = sized
        self.d = sized.design
        self.freq = skrf.Frequency.from_f(np.asarray(f_hz, dtype=float), unit="hz")
        self.w = 2 * np.pi * self.freq.f
        self.m = DefinedGammaZ0(self.freq, z0_port=50, z0=50, gamma=1j * self.w / C0)

    def _ladder_z(self, ln):
        # the rendered loss ladder (netgen.synthesis.losses.LossNet: the netlist's values), its
        # impedance written out here: R0 + sum of R_k || L_k (or R_k || C_k) sections
        z = np.full(self.w.shape, complex(ln.r0_ohm))
        for r, x in ln.sections:
            zx = 1j * self.w * x if ln.kind != "C" else 1 / (1j * self.w * x)
            z = z + r * zx / (r + zx)
        return z

    def ser(self, name):
        return self.m.resistor(self._z(name))

    def to_gnd(self, name):
        """1-port: the component from a node to ground."""
        return self.ser(name) ** self.m.short()

    def shunt1(self, oneport):
        return self.m.shunt(oneport)

    def par_to_gnd(self, *names):
        """1-port: components in parallel from a node to ground."""
        net = self.to_gnd(names[0])
        for n in names[1:]:
            net = self.m.shunt(self.to_gnd(n)) ** net
        return net

    def par_series(self, a, b):
        """2-port: a parallel LC in series (shunt of a tee would not do; use impedance)."""
        za = self._z(a)
        zb = self._z(b)
        return self.m.resistor(za * zb / (za + zb))

    def _z(self, name):
        c = self.s.components[name]
        ln = loss_net(self.s, name)
        z = 1j * self.w * ln.main if c.kind == "L" else 1 / (1j * self.w * ln.main)
        return z + self._ladder_z(ln)

    def line(self, base):
        plan = line_plan(self.s, base)
        lm = DefinedGammaZ0(self.freq, z0_port=50, z0=plan["z0"], gamma=1j * self.w / C0)
        seg = lm.line(plan["td_seg"] * C0, unit="m")
        net = seg
        for _ in range(plan["k"] - 1):
            net = net ** self.m.resistor(self._ladder_z(line_loss_net(self.s, base))) ** seg
        return net

    def tail(self):
        net = None
        for name, c in self.s.components.items():
            if name.startswith("match_series") or name.startswith("loadx"):
                el = self.ser(name)
            elif name.startswith("match_shunt"):
                el = self.shunt1(self.to_gnd(name))
            else:
                continue
            net = el if net is None else net ** el
        load = self.m.resistor(self.d.load_ohm) ** self.m.short()
        return load if net is None else net ** load

    def comp(self):
        """The Cout compensator branches (series L-C to ground at the drain), or None."""
        net = None
        for name in self.s.components:
            if name.startswith("comp") and name.endswith("_l"):
                branch = self.m.shunt(self.ser(name) ** self.ser(name[:-2] + "_c") ** self.m.short())
                net = branch if net is None else net ** branch
        return net

    def intrinsic(self):
        """Z seen by the generator: shunt Cout, series package Ld, shunt package Cp, then the network."""
        dev = self.d.device
        net = self._network()
        if dev.package_c_f > 0:
            net = self.m.shunt_capacitor(dev.package_c_f) ** net
        if dev.package_l_h > 0:
            net = self.m.inductor(dev.package_l_h) ** net
        if dev.cout_f > 0:
            net = self.m.shunt_capacitor(dev.cout_f) ** net
        return net.z[:, 0, 0]

    def build(self):
        return self._network().z[:, 0, 0]

    def _network(self):
        comp = self.comp()
        net = self._chain()
        return net if comp is None else comp ** net

    def _chain(self):
        t = self.d.topology
        feed = self.shunt1(self.to_gnd("feed_l"))
        if t == "class_f_line":
            net = feed ** self.ser("block_c") ** self.line("line") ** self.shunt1(self.par_to_gnd("tank_l", "tank_c")) ** self.tail()
        elif t == "class_f_feed":
            end = self.shunt1(self.to_gnd("feed_l")) ** self.to_gnd("bypass_c")
            net = self.shunt1(self.line("feedline") ** end) ** self.ser("block_c") ** self.ser("res_l") ** self.ser("res_c") ** self.tail()
        elif t == "class_f_lumped":
            net = feed ** self.ser("block_c")
            for k in range(1, self.d.network.harmonics + 1):
                n = 2 * k + 1
                net = net ** self.par_series(f"res{n}_l", f"res{n}_c")
            net = net ** self.shunt1(self.par_to_gnd("tank_l", "tank_c")) ** self.tail()
        elif t == "inverse_f_line":
            net = feed ** self.ser("block_c") ** self.line("line") ** self.ser("res_l") ** self.ser("res_c") ** self.tail()
        elif t == "class_e":
            net = feed ** self.shunt1(self.to_gnd("shunt_c")) ** self.ser("series_c") ** self.ser("series_l") ** self.ser("excess_l") ** self.tail()
        elif t == "class_b_tuned":
            net = feed ** self.ser("block_c") ** self.shunt1(self.par_to_gnd("tank_l", "tank_c")) ** self.tail()
        else:
            raise AssertionError(t)
        return net


def ngspice_z(sized, f_hz):
    freq, vec = run_ac(render(sized, "ac", ac_freqs_hz=f_hz), backend="batch")
    idx = [int(np.argmin(abs(freq - f))) for f in f_hz]
    assert_allclose(freq[idx], f_hz, rtol=1e-9)
    return vec["drain"][idx]


def example(topology, **network):
    d = load_design(SIMS / f"{topology}.toml")
    if network:
        raw = dict(d.raw)
        raw["network"] = {**raw.get("network", {}), **network}
        d = design_from_dict(raw, source=d.source)
    return size(d)


# ------------------------------------------------------------ three-way agreement

@pytest.mark.ngspice
@pytest.mark.parametrize("topology", list(TOPOLOGY_REGISTRY))
def test_three_way_agreement(topology):
    # lossy example designs (inductor Q, ESR, segmented lossy line where the example has one)
    s = example(topology)
    f = HARM * s.design.f0_hz
    z_np = z_drain(s, f)
    z_sk = SkrfModel(s, f).build()
    z_sp = ngspice_z(s, f)
    assert_allclose(z_sp, z_np, rtol=0.01)
    assert_allclose(z_sk, z_np, rtol=0.01)


@pytest.mark.ngspice
def test_three_way_with_load_reactance_and_highpass():
    s = example("class_b_tuned", match="highpass", line_loss="0.1 dB")
    d = design_from_dict({**s.design.raw, "design": {**s.design.raw["design"], "load_x": "-20 ohm"}}, source=s.design.source)
    s = size(d)
    f = HARM * d.f0_hz
    assert_allclose(ngspice_z(s, f), z_drain(s, f), rtol=0.01)
    assert_allclose(SkrfModel(s, f).build(), z_drain(s, f), rtol=0.01)


# ------------------------------------------------------------ harmonic behaviour (near-lossless)

def near_lossless(topology):
    # unloaded Q 2000 keeps the resonances finite; loss changes |Z(f0)| by well under 1 %
    return example(topology, inductor_q=2000, capacitor_esr="0 ohm", line_loss="0 dB")


def without_cout(topology):
    """near_lossless with device.cout = 0: the network alone is the class's pattern at the drain."""
    s = near_lossless(topology)
    raw = dict(s.design.raw)
    raw["device"] = {**raw.get("device", {}), "cout": "0 F"}
    return size(design_from_dict(raw, source=s.design.source))


@pytest.mark.parametrize("topology", [t for t in TOPOLOGY_REGISTRY if t != "class_e"])
def test_fundamental_is_ropt(topology):
    # at the intrinsic plane (the generator inside Cout; netgen.synthesis.intrinsic)
    s = near_lossless(topology)
    z1 = z_intrinsic(s, [s.design.f0_hz])[0]
    assert abs(abs(z1) / s.ropt_ohm - 1) < 0.02


@pytest.mark.parametrize("topology", ["class_f_line", "class_f_feed"])
def test_class_f_line_harmonics(topology):
    # Quarter-wave line (common practice; docs/check_values.md): even harmonics see a short, odd an open.
    # Asserted ratios: |Z(2f0)|, |Z(4f0)| < Ropt/5 (a short within the class-F sense: the
    # second-harmonic voltage stays below ~20 % of ideal) and |Z(3f0)|, |Z(5f0)| > 5 Ropt.
    # At the intrinsic plane (the example's Cout is absorbed by the compensator); and at the drain
    # terminal of the same network sized without Cout.
    for s, z_of in ((near_lossless(topology), z_intrinsic), (without_cout(topology), z_drain)):
        z = abs(z_of(s, HARM * s.design.f0_hz)) / s.ropt_ohm
        assert z[1] < 0.2 and z[3] < 0.2
        assert z[2] > 5 and z[4] > 5


def test_class_f_lumped_harmonics():
    # Lumped class F with the default resonator impedance (netgen.synthesis.sizing.lumped_resonator_z):
    # each parallel resonator is an open at its own harmonic and the resonators' small inductive
    # reactance (Zr S_m, Zr ~ 0.1 Ropt) plus the shunt tank's capacitor make the even harmonics
    # low. Asserted as for class F in general (Raab 2001: class F needs opens at odd and shorts
    # at even harmonics; docs/check_values.md): |Z(2f0)|, |Z(4f0)| < Ropt/4 (the even-harmonic voltage
    # stays below a quarter of what the fundamental load would give) and |Z(3f0)|, |Z(5f0)| > 4 Ropt,
    # with the example's inductor Q (40) and capacitor ESR (0.1 ohm), and near-lossless too.
    for s in (example("class_f_lumped"), near_lossless("class_f_lumped")):
        z = abs(z_drain(s, HARM * s.design.f0_hz)) / s.ropt_ohm
        assert z[1] < 0.25 and z[3] < 0.25, z
        assert z[2] > 4 and z[4] > 4, z
    # the old default Zr = Ropt (network.resonator_z) left |Z(2f0)| ~ 1.5 Ropt: no class F
    s = example("class_f_lumped", resonator_z=f"{example('class_f_lumped').ropt_ohm!r} ohm")
    assert abs(z_drain(s, [2 * s.design.f0_hz])[0]) / s.ropt_ohm > 1.0


@pytest.mark.ngspice
def test_class_f_lumped_harmonics_in_ngspice():
    # the same shorts and opens in ngspice's AC analysis of the rendered netlist (example design)
    s = example("class_f_lumped")
    z = abs(ngspice_z(s, HARM * s.design.f0_hz)) / s.ropt_ohm
    assert z[1] < 0.25 and z[3] < 0.25 and z[2] > 4 and z[4] > 4, z


def test_inverse_f_harmonics_formula():
    # Ideal quarter-wave line (Pozar): at odd n the line inverts, Z = Z0^2/Z_end; at even n it
    # is a half wave, Z = Z_end, with Z_end = RL (1 + j Q (n - 1/n)) the series resonator of
    # loaded Q in series with RL; then the DC block in series and the feed choke in parallel
    # at the drain (ideal lumped elements). Q = 2000 loss makes the small rest (1 % allowed).
    s = without_cout("inverse_f_line")
    d = s.design
    w = 2 * np.pi * d.f0_hz
    q, rl = d.network.loaded_q, d.load_ohm
    z = z_drain(s, HARM * d.f0_hz)
    for n in HARM[1:]:
        z_end = rl * (1 + 1j * q * (n - 1 / n))
        expect = z_end if n % 2 == 0 else s.value("line_z0") ** 2 / z_end
        expect = expect + 1 / (1j * n * w * s.value("block_c"))  # the DC block in series
        expect = 1 / (1 / expect + 1 / (1j * n * w * s.value("feed_l")))  # the choke in parallel
        assert abs(abs(z[n - 1]) / abs(expect) - 1) < 0.01, n
    zr = abs(z) / s.ropt_ohm
    assert zr[1] > 5 and zr[3] > 5 and zr[2] < 0.2 and zr[4] < 0.2


def test_class_e_fundamental_sokal():
    # Sokal & Sokal 1975: at f0 the drain sees R (1 + j 1.1525) in parallel with the external
    # shunt C (Cout excluded: it is the device's) and the choke. Loaded Q makes the series
    # resonator exactly resonant at f0, so only the excess reactance remains.
    s = near_lossless("class_e")
    w = 2 * np.pi * s.design.f0_hz
    r = s.ropt_ohm
    y = 1 / (r * (1 + 1.1525j)) + 1j * w * s.value("shunt_c") + 1 / (1j * w * s.value("feed_l"))
    assert_allclose(z_drain(s, [s.design.f0_hz])[0], 1 / y, rtol=0.01)


# ------------------------------------------------------------ references

def test_quarter_wave_transformer():
    # Pozar, the quarter-wave transformer: Zin = Z0^2/ZL at f0; Zin = ZL at 2 f0 (half wave)
    z0, f0 = 70.71, 1e9
    zl = 30 + 20j
    m = abcd_tline(z0, 1 / (4 * f0), 2 * np.pi * np.array([f0, 2 * f0]))
    zin = z_in(m, zl)
    assert_allclose(zin[0], z0**2 / zl, rtol=1e-12)
    assert_allclose(zin[1], zl, rtol=1e-12)


@pytest.mark.parametrize("c_pf, expected", [
    (10, [100.0, 10.38, 843.7, 4.229, 1511]),
    (30, [100.0, 3.528, 2515, 1.414, 4525]),
    (100, [100.0, 1.061, 8378, 0.4244, 15080]),
])
def test_references_tank_table(c_pf, expected):
    # Worked example of docs/check_values.md (Pozar, the quarter-wave transformer): lossless line Z0 = 70.71 ohm,
    # 50 ohm || tank resonant at 1 GHz; choke 1 H and block 1 F make feed and block vanish.
    c = c_pf * 1e-12
    lval = 1 / ((2 * np.pi * 1e9) ** 2 * c)
    d = design_from_dict({
        "design": {"name": "ref", "topology": "class_f_line", "f0": "1 GHz", "vdd": "10 V", "ropt": "100 ohm"},
        "network": {"feed_l": "1 H", "block_c": "1 F", "values": {"tank_c": f"{c!r} F", "tank_l": f"{lval!r} H"}},
    })
    s = size(d)
    assert_allclose(s.value("line_z0"), 70.71, rtol=1e-4)
    assert_allclose(abs(z_drain(s, HARM * 1e9)), expected, rtol=2e-3)


def test_lossy_line_attenuation():
    # A line of line_loss dB between 50 ohm terminations (Z0 = 50 ohm) has |S21| = -line_loss dB;
    # S21 = 2/(A + B/Z0 + C Z0 + D) (Pozar, conversions between two-port parameters). The lumps
    # reflect a little (about 1 % of the dB figure at 0.5 dB), so allow 2 %.
    for db in (0.5, 0.1):
        d = design_from_dict({
            "design": {"name": "att", "topology": "class_f_line", "f0": "1 GHz", "vdd": "10 V", "ropt": "50 ohm"},
            "network": {"line_loss": f"{db} dB", "feed_l": "1 H", "block_c": "1 F", "values": {"tank_l": "1 H", "tank_c": "1e-30 F"}},
        })
        s = size(d)
        a, b, c, dd = abcd_drain_to_load(s, [1e9])[0].ravel()
        s21 = 2 / (a + b / 50 + c * 50 + dd)
        assert_allclose(-20 * np.log10(abs(s21)), db, rtol=0.02)


@pytest.mark.parametrize("topology", list(TOPOLOGY_REGISTRY))
def test_port_matrix_reciprocal_and_consistent(topology):
    # A passive network of R, L, C and lines is reciprocal: Z12 = Z21 (Pozar, reciprocal
    # networks); terminating port 2 in RL gives Zin = Z11 - Z12 Z21/(Z22 + RL) = z_drain.
    from netgen.synthesis.network import z_port_matrix

    s = example(topology)
    f = HARM * s.design.f0_hz
    z = z_port_matrix(s, f)
    assert_allclose(z[:, 0, 1], z[:, 1, 0], rtol=1e-9)
    rl = s.design.load_ohm
    assert_allclose(z[:, 0, 0] - z[:, 0, 1] * z[:, 1, 0] / (z[:, 1, 1] + rl), z_drain(s, f), rtol=1e-9)
