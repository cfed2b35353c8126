"""The input side of the angelov device (docs/devices.md "The input network", docs/metrics.md): the
L-section sized to the device's input, the input power balances, the small-signal two-port against
the low-drive transient, AM-PM, and the conduction angle against Cripps's reduced-conduction-angle
analysis."""

from __future__ import annotations

import copy
import math
from pathlib import Path

import numpy as np
import pytest
import tomllib

from netgen.design import design_from_dict
from netgen.netlist import render
from netgen.synthesis import angelov_input_z, input_network_z, pozar_l_section, size

SIMS = Path(__file__).resolve().parents[1] / "sims"


def _example(**drive):
    doc = tomllib.loads((SIMS / "class_b_angelov.toml").read_text())
    doc["drive"].update({"match": "none", "bias": "none", "pin": "20 dBm"})
    doc["drive"].update(drive)
    return doc


def _design(doc):
    return design_from_dict(doc, source=SIMS / "x.toml")


@pytest.mark.parametrize("z_load", [complex(0.25, -130.0), complex(12.0, 40.0), complex(150.0, -60.0), complex(80.0, 0.0)])
@pytest.mark.parametrize("solution", ["lowpass", "highpass"])
def test_pozar_l_section_matches_to_z0(z_load, solution):
    # Pozar, "Microwave Engineering", 4th ed., sec. 5.1: the L-section's input impedance is Z0
    # (here recomputed by hand from the series and shunt elements, not with the formula's inverse)
    z0 = 50.0
    where, x, b = pozar_l_section(z_load, z0, solution)
    if where == "shunt_at_source":
        z_in = 1.0 / (1j * b + 1.0 / (z_load + 1j * x))
    else:
        z_in = 1j * x + 1.0 / (1j * b + 1.0 / z_load)
    assert abs(z_in - z0) < 1e-9 * z0
    if solution == "lowpass":
        assert b > 0  # the shunt element is a capacitor
    else:
        assert b < 0


def test_input_network_presents_rs_with_losses():
    # the sized network with its inductor loss (network.inductor_q) and the DC block and feed:
    # Zin = Rs at f0 (the lossless-conjugate-match condition; Pozar sec. 5.1 and 2.6)
    for bias in ("none", "choke"):
        d = _design(_example(match="lowpass", bias=bias))
        s = size(d)
        zdev = angelov_input_z(d, z_drain_ohm=s.ropt_ohm)
        z = input_network_z(d, s.input_network, zdev)
        assert abs(z - 50.0) < 1e-6
        assert [c.role for c in s.input_network.values()][:2] == ["input_match", "input_match"]


def test_input_z_by_hand_for_a_plain_capacitive_gate():
    # gm = 0 (deep pinch-off), Rd = Rs = 0, Cgd = 0: Zin = 1/(j w Cgs) with Cgs the SPICE junction
    # capacitance Cgs0 / (1 - V/Vbi)^M (SPICE3 diode model, recalled from memory)
    doc = _example()
    doc["device"].update(vgate_bias="-20 V", rs="0 ohm", rd="0 ohm", cgd0="1e-30 F", preset="lv_gan_2w")
    d = _design(doc)
    z = angelov_input_z(d, z_drain_ohm=50.0)
    c = 2.5e-12 / (1.0 + 20.0 / 1.0) ** 0.5
    assert z.imag == pytest.approx(-1.0 / (2 * math.pi * 900e6 * c), rel=1e-6)
    assert abs(z.real) < 1e-3


def test_highpass_without_bias_network_is_refused():
    from netgen.errors import DesignError

    with pytest.raises(DesignError, match="drive.bias"):
        size(_design(_example(match="highpass", bias="none")))


def test_unknown_input_value_is_refused():
    from netgen.errors import DesignError

    doc = _example(match="lowpass", bias="none")
    doc["drive"]["values"] = {"in_foo_l": "1 nH"}
    with pytest.raises(DesignError, match="drive.values.in_foo_l"):
        size(_design(doc))


@pytest.mark.ngspice
def test_input_power_balance_closes_with_the_network():
    # energy conservation at the input (common practice): power into the input port plus the
    # gate-bias supply's = power into the gate + the input network's losses, within 1 %; and the
    # available power = fundamental delivered + reflected (Pozar sec. 2.6, 11.1)
    from netgen.pipeline import evaluate

    m = evaluate(_design(_example(match="lowpass", bias="resistor", pin="10 dBm")))
    assert m["settled"]
    assert abs(m["input_balance_error"]) < 0.01
    assert abs(m["input_avail_balance_error"]) < 0.01
    assert m["pin_port_w"] > 0 and m["pin_w"] > 0
    assert m["input_network_loss_w"] > 0
    assert m["pae"] <= m["drain_efficiency"]
    assert m["input_return_loss_db"] > 6.0  # matched at the bias, still within a few dB under drive


@pytest.mark.ngspice
def test_small_signal_gain_equals_ac_s21():
    # low drive at a class-A bias: the transient's transducer gain equals |S21|^2 of the circuit
    # linearised at its bias point (ngspice AC analysis, S from Z with scikit-rf) within 0.2 dB;
    # and the output phase relative to the incident wave (am_pm_deg) is S21's phase (within 1 deg)
    from netgen.pipeline import evaluate
    from netgen.studies import small_signal_two_port

    doc = _example(pin="-20 dBm")
    doc["device"]["vgate_bias"] = "-1.2 V"
    d = _design(doc)
    ss = small_signal_two_port(size(d))
    m = evaluate(d)
    assert m["settled"]
    assert m["gain_transducer_db"] == pytest.approx(ss["s21_db"], abs=0.2)
    dphi = (m["am_pm_deg"] - ss["s21_deg"] + 180.0) % 360.0 - 180.0
    assert abs(dphi) < 1.0
    # the port's input impedance: the transient's fundamental V1/I1 against the two-port's
    assert complex(m["zin_port_re_ohm"], m["zin_port_im_ohm"]) == pytest.approx(ss["zin_ohm"], rel=0.02)


def _cripps_eta(alpha):
    """Cripps, "RF Power Amplifiers for Wireless Communications", 2nd ed., ch. 3 (reduced
    conduction angle, tuned load, full swing): eta = (alpha - sin alpha) / (4 (sin(alpha/2) - (alpha/2) cos(alpha/2)))."""
    return (alpha - math.sin(alpha)) / (4.0 * (math.sin(alpha / 2) - (alpha / 2) * math.cos(alpha / 2)))


@pytest.mark.ngspice
@pytest.mark.slow
@pytest.mark.parametrize("angle_deg", [120.0, 180.0, 240.0, 300.0])
def test_conduction_angle_and_efficiency_follow_cripps(angle_deg):
    # the gm device is a transconductance with a sharp threshold at Vgs = 0, biased at
    # -cos(angle/2) with unit gate swing: Cripps's conduction angle 2 arccos(-Vbias/Vswing) is the
    # set angle; the measured one (the fraction of the period with Id above 1 % of its peak)
    # within 5 deg (the threshold cuts a little of each flank, most at wide angles: 4 deg at
    # 300 deg). Efficiency: a near-zero knee (vknee 0.05 V
    # of 12 V) and lossless parts: Cripps's curve within 3 points -- loosely, because the tuned
    # load's finite Q leaves harmonic voltage across the device and the knee takes a little swing.
    from netgen.pipeline import evaluate

    doc = {"design": {"name": "ca", "topology": "class_b_tuned", "f0_hz": None, "f0": "100 MHz", "vdd": "12 V", "pout": "2 W"},
           "device": {"model": "gm", "conduction_angle": f"{angle_deg} deg", "vknee": "0.05 V"},
           "network": {"loaded_q": 10}, "sim": {"points_per_cycle": 720}}
    doc["design"].pop("f0_hz")
    m = evaluate(design_from_dict(doc))
    assert m["settled"]
    vbias = -math.cos(math.radians(angle_deg) / 2.0)
    theory = math.degrees(2.0 * math.acos(-vbias / 1.0))
    assert m["conduction_angle_deg"] == pytest.approx(theory, abs=5.0)
    # the metric's threshold (1 % of the peak) on the truncated cosine (Imax (cos t - cos(a/2)) /
    # (1 - cos(a/2)), Cripps ch. 3): 2 arccos(cos(a/2) + 0.01 (1 - cos(a/2))), within 1 deg
    c = math.cos(math.radians(angle_deg) / 2.0)
    assert m["conduction_angle_deg"] == pytest.approx(math.degrees(2.0 * math.acos(c + 0.01 * (1.0 - c))), abs=1.0)
    assert m["drain_efficiency"] == pytest.approx(_cripps_eta(math.radians(angle_deg)), abs=0.03)


@pytest.mark.ngspice
@pytest.mark.slow
def test_bias_sweep_moves_the_angelov_device_from_class_a_to_c():
    # device.vgate_bias at a fixed drive (16 dBm) moves the conduction angle from near class A
    # (above the threshold by more than the swing) through class B (about 180 deg at the preset's
    # suggested class-B bias) to class C (below 180 deg), monotonically (Cripps ch. 3). Measured:
    # 242, 187, 145 deg (the soft tanh turn-on of the preset keeps -1 V short of 360 deg at this drive).
    from netgen.pipeline import evaluate

    angles = []
    for vgg in ("-1.0 V", "-2.7 V", "-4.0 V"):
        doc = _example(pin="16 dBm")
        doc["device"]["vgate_bias"] = vgg
        m = evaluate(_design(doc))
        assert m["settled"]
        angles.append(m["conduction_angle_deg"])
    assert angles[0] > 230.0
    assert 170.0 < angles[1] < 205.0
    assert angles[2] < 160.0
    assert np.all(np.diff(angles) < 0)


def test_sized_file_pins_the_input_network(tmp_path):
    # `pashape size` writes [drive.values]; loading it back gives the same input network, and a
    # changed bias then keeps it (the values override sizing)
    from netgen.design import load_design
    from netgen.synthesis import write_sized_toml

    d = _design(_example(match="lowpass", bias="choke"))
    s = size(d)
    out = write_sized_toml(s, tmp_path / "sized.toml")
    back = size(load_design(out))
    assert {k: c.value for k, c in back.input_network.items()} == {k: c.value for k, c in s.input_network.items()}
    doc = tomllib.loads(out.read_text())
    doc["device"]["vgate_bias"] = "-2.0 V"
    moved = size(design_from_dict(doc, source=out))
    assert {k: c.value for k, c in moved.input_network.items()} == {k: c.value for k, c in s.input_network.items()}


@pytest.mark.ngspice
@pytest.mark.slow
def test_small_signal_gain_through_the_input_network():
    # the same check with the lowpass L-section and the resistor gate feed in the circuit: port 1
    # is the network's input (gin). Measured 37.89 dB (AC) against 37.79 dB (transient)
    from netgen.pipeline import evaluate
    from netgen.studies import small_signal_two_port

    doc = _example(match="lowpass", bias="resistor", pin="-20 dBm")
    doc["device"]["vgate_bias"] = "-1.2 V"
    doc["sim"]["max_cycles"] = 800
    d = _design(doc)
    ss = small_signal_two_port(size(d))
    m = evaluate(d)
    assert m["settled"]
    assert m["gain_transducer_db"] == pytest.approx(ss["s21_db"], abs=0.2)
    assert ss["s11_db"] < -15.0  # matched at the bias (Pozar L-section): |S11| small


@pytest.mark.ngspice
def test_gate_resistance_is_in_series_with_the_gate_in_sizing_ac_and_the_estimate():
    # device.ri: the gate resistance in series with everything behind the gate terminal, so the
    # input impedance grows by exactly Ri (series impedances add; circuit theory, common practice)
    # in the sizing's model and in ngspice's AC analysis of the rendered netlist alike; the periodic
    # estimate of the netlist with Ri agrees with ngspice's transient (docs/closure.md's bound, 0.2 %)
    from netgen.studies import small_signal_two_port
    from netgen.studies.fast import disagreement, estimate_waveforms, evaluate_estimate, evaluate_ngspice

    ri = 1.5
    doc = _example()
    with_ri = copy.deepcopy(doc)
    with_ri["device"]["ri"] = f"{ri} ohm"
    d0, d1 = _design(doc), _design(with_ri)
    s0, s1 = size(d0), size(d1)
    z0 = angelov_input_z(d0, z_drain_ohm=s0.ropt_ohm)
    z1 = angelov_input_z(d1, z_drain_ohm=s1.ropt_ohm)
    assert z1 - z0 == pytest.approx(ri, abs=1e-9)
    ac0, ac1 = small_signal_two_port(s0)["zin_ohm"], small_signal_two_port(s1)["zin_ohm"]
    assert ac1 - ac0 == pytest.approx(ri, abs=1e-6)
    net = render(s1)
    assert "RI_DEV gate agi 1.5" in net and "DCGS agi asi DCGSMOD" in net and "v(agi,asi)" in net
    assert "agi" not in render(s0)  # Ri = 0: the netlist of before, line for line (tests/test_cds_junction.py)
    zero = copy.deepcopy(doc)
    zero["device"]["ri"] = "0 ohm"
    assert size(_design(zero)).digest() == s0.digest() != s1.digest()  # and the sized-design digest of before
    est, full = evaluate_estimate(d1), evaluate_ngspice(d1)
    assert not disagreement(est, full)["flagged"]
    assert est["pin_w"] == pytest.approx(full["pin_w"], rel=0.01)
    # the input power is Ri's Joule loss Ri <ig^2> plus what the intrinsic gate takes <v(agi) ig>
    # (the gate terminal's only other branch is RSRC: the drive current flows through Ri; energy
    # conservation, Tellegen's theorem); Ri's share lowers the PAE
    wf, _ = estimate_waveforms(s1, render(s1, mode="tran"))
    ig = np.asarray(wf.i["gate"])
    joule, intrinsic = ri * np.mean(ig ** 2), np.mean(np.asarray(wf.v["agi"]) * ig)
    assert joule + intrinsic == pytest.approx(est["pin_w"], rel=1e-6)
    assert joule > 0.1 * est["pin_w"]
    assert est["pae"] < evaluate_estimate(d0)["pae"]
