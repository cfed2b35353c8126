"""The angelov device (templates/devices.j2, docs/devices.md): its I-V against the published
equation, the Cripps class-B limit, the drive metrics, the periodic-start fallback, the presets."""

from __future__ import annotations

import math
from pathlib import Path

import pytest
import tomllib

from netgen.design import DEVICE_PRESETS, design_from_dict, load_design
from netgen.netlist import device_expression, read_cards, render
from netgen.synthesis import size

SIMS = Path(__file__).resolve().parents[1] / "sims"

# published parameters of the test device (invented values), SI
IPK, VPK, P1, P2, P3, ALPHA, LAM = 0.4, -1.2, 1.6, 0.1, -0.05, 2.5, 0.01


def _doc(**device):
    dev = {"model": "angelov", "ipk": f"{IPK} A", "vpk": f"{VPK} V", "p1": P1, "p2": P2, "p3": P3,
           "alpha": ALPHA, "lambda": LAM, "vgate_bias": "-2.7 V"}
    dev.update(device)
    return {"design": {"name": "ang", "topology": "class_b_tuned", "f0": "900 MHz", "vdd": "12 V", "pout": "2 W"},
            "device": dev, "drive": {"pin": "20 dBm"}, "sim": {"points_per_cycle": 400, "max_cycles": 400}}


def _angelov_ids(vgs, vds):
    """Angelov, Zirath, Rorsman, IEEE Trans. MTT 40(12), 1992, eq. (1)-(2), written out by hand:
    Ids = Ipk (1 + tanh psi) tanh(alpha Vds) (1 + lambda Vds), psi = P1 u + P2 u^2 + P3 u^3, u = Vgs - Vpk."""
    u = vgs - VPK
    psi = P1 * u + P2 * u * u + P3 * u * u * u
    return IPK * (1.0 + math.tanh(psi)) * math.tanh(ALPHA * vds) * (1.0 + LAM * vds)


def _bdev(netlist):
    card = next(c for c in read_cards(netlist) if c.name.upper() == "BDEV")
    expr = card.text.split("I=", 1)[1]
    return card.tokens, expr


@pytest.mark.parametrize("vgs, vds", [(-1.2, 5.0), (-2.0, 0.3), (-0.5, 10.0), (-3.0, 1.0), (0.2, 0.05)])
def test_rendered_iv_is_the_published_equation(vgs, vds):
    # the rendered B-source expression, evaluated, equals the published equation computed by hand
    sized = size(design_from_dict(_doc()))
    tokens, expr = _bdev(render(sized))
    f, nodes = device_expression(expr, "BDEV")
    assert tokens[1:3] == ["dsw", "0"] and nodes == {"gate", "dsw"}
    got = float(f({"gate": vgs, "dsw": vds}))
    assert got == pytest.approx(_angelov_ids(vgs, vds), rel=1e-9)  # Angelov et al. 1992, eq. (1)


def test_hand_value_at_peak_transconductance():
    # at Vgs = Vpk, psi = 0: Ids = Ipk tanh(alpha Vds)(1 + lambda Vds) (Angelov et al. 1992);
    # 0.4 x tanh(12.5) x 1.05 = 0.42 A (hand arithmetic)
    assert _angelov_ids(VPK, 5.0) == pytest.approx(0.42, rel=1e-6)


def test_access_resistances_move_the_control_nodes():
    # with Rd and Rs the law is written between the intrinsic nodes adi and asi (docs/devices.md)
    sized = size(design_from_dict(_doc(rd="0.3 ohm", rs="0.2 ohm")))
    net = render(sized)
    tokens, expr = _bdev(net)
    assert tokens[1:3] == ["adi", "asi"]
    f, nodes = device_expression(expr, "BDEV")
    got = float(f({"gate": -1.0, "asi": 0.1, "adi": 4.1}))
    assert got == pytest.approx(_angelov_ids(-1.1, 4.0), rel=1e-9)
    assert "RD_DEV dsw adi 0.3" in net and "RS_DEV asi 0 0.2" in net


@pytest.mark.ngspice
def test_ngspice_dc_current_equals_the_equation():
    # ngspice's own evaluation of the rendered B source at a DC point (SPICE3 B-source semantics)
    from netgen.simulator import run_op

    sized = size(design_from_dict(_doc()))
    _, expr = _bdev(render(sized))
    vgs, vds = -1.7, 3.0
    net = f"angelov dc\nVG gate 0 DC {vgs}\nVD dsw 0 DC {vds}\nBDEV dsw 0 I={expr}\n.op\n.end\n"
    vec = run_op(net)
    ids = -float(vec["vd#branch"])
    assert ids == pytest.approx(_angelov_ids(vgs, vds), rel=1e-6)


def test_gate_junctions_and_reverse_diode():
    # Cgs, Cgd as SPICE junction diodes (CJO, VJ, M: the SPICE3 diode's depletion capacitance
    # C = CJO/(1 - V/VJ)^M), the reverse-conduction diode from source to drain
    net = render(size(design_from_dict(_doc(cgs0="2.5 pF", cgd0="0.15 pF", vbi="1 V", mj=0.5))))
    assert "DCGS gate 0 DCGSMOD" in net and "DCGD gate dsw DCGDMOD" in net and "DREV 0 dsw DREVMOD" in net
    assert "CJO=2.5e-12 VJ=1 M=0.5" in net and "CJO=1.5e-13 VJ=1 M=0.5" in net


def test_drive_source_from_available_power():
    # Pavail = |Vs|^2/(8 Rs) (maximum power transfer; Pozar, Microwave Engineering, sec. 2.6):
    # 20 dBm = 0.1 W into 50 ohm -> |Vs| = sqrt(8 x 50 x 0.1) = 6.3246 V
    d = design_from_dict(_doc())
    assert d.drive.vs_peak_v == pytest.approx(math.sqrt(40.0), rel=1e-12)
    net = render(size(d))
    assert "VDRIVE vsrc 0 SIN(-2.7 6.32455532 900000000)" in net and "RSRC vsrc gate 50" in net
    # the same power written in W
    d2 = design_from_dict({**_doc(), "drive": {"pin": "0.1 W", "source_r": "25 ohm"}})
    assert d2.drive.pin_dbm == pytest.approx(20.0) and d2.drive.vs_peak_v == pytest.approx(math.sqrt(20.0))


def test_presets_fill_and_yield_to_given_keys():
    doc = _doc()
    doc["device"] = {"model": "angelov", "preset": "hv_ldmos_30w", "ipk": "3 A"}
    d = design_from_dict(doc)
    assert d.device.ipk_a == 3.0  # given key wins
    assert d.device.vpk_v == pytest.approx(4.5) and d.device.cout_f == pytest.approx(12e-12)
    assert set(DEVICE_PRESETS) == {"lv_gan_2w", "hv_ldmos_30w"}


def test_unknown_preset_is_refused():
    from netgen.errors import DesignError

    with pytest.raises(DesignError, match="device.preset"):
        design_from_dict(_doc(preset="nope"))


def test_periodic_estimate_covers_the_junction_charges():
    # the estimate now solves the device's B source and junction diodes by periodic collocation
    # (netgen.periodic.collocation); its cycle means satisfy the network's DC equations: the choke
    # carries the supply current and the mean drain voltage is Vdd (an ideal choke has no mean
    # voltage: v = L di/dt, common practice)
    from netgen.periodic import estimate

    net = render(size(design_from_dict(_doc())))
    state = estimate(net, 900e6, 400)
    assert state.ports and "gate" in state.ports
    assert abs(state.mean("drain") - 12.0) < 1e-6 * 12.0
    assert abs(state.mean("l_feed#branch") + state.mean("vdd#branch")) < 1e-9


CRIPPS = {
    "design": {"name": "cripps_b", "topology": "class_b_tuned", "f0": "100 MHz", "vdd": "12 V", "ropt": "35 ohm"},
    # P1 alone, bias 1.5/P1 below Vpk (the tanh gate law's class-B point), near-zero knee (alpha 50/V:
    # 2/alpha = 0.04 V), no gate capacitance, junctions offset so the gate draws nothing
    "device": {"model": "angelov", "ipk": "0.5 A", "vpk": "0 V", "p1": 2.0, "alpha": 50.0, "cgs0": "0 F",
               "cgd0": "0 F", "vcj": "5 V", "vgate_bias": "-0.75 V"},
    # |Vs| = sqrt(8 x 50 x 2.5 mW) = 1 V at the open gate; Ropt = Vdd / I1 = 12 / 0.3423 = 35 ohm (full swing)
    "drive": {"pin": "2.5 mW"},
    "network": {"loaded_q": 5},
    "sim": {"points_per_cycle": 400, "max_cycles": 400},
}


@pytest.mark.ngspice
@pytest.mark.slow
def test_tuned_class_b_near_zero_knee_tends_to_pi_over_4():
    # Cripps, "RF Power Amplifiers for Wireless Communications", 2nd ed., ch. 3: ideal class B at
    # full swing reaches pi/4 = 78.5 % drain efficiency; measured 76.8 % here (the tanh turn-on
    # is soft, so a little quiescent current remains)
    from netgen.pipeline import evaluate

    m = evaluate(design_from_dict(CRIPPS))
    assert m["settled"]
    assert m["drain_efficiency"] == pytest.approx(math.pi / 4, abs=0.03)
    assert m["pae"] <= m["drain_efficiency"]


def _shipped_angelov():
    out = []
    for p in sorted(SIMS.glob("*.toml")):
        if tomllib.loads(p.read_text()).get("device", {}).get("model") == "angelov":
            out.append(p)
    return out


def test_an_angelov_example_ships():
    assert _shipped_angelov(), "sims/ has no design with the angelov device"


@pytest.mark.ngspice
@pytest.mark.slow
@pytest.mark.parametrize("path", _shipped_angelov(), ids=lambda p: p.stem)
def test_shipped_angelov_designs_pae_and_pin(path):
    # common practice: PAE = (Pout - Pin)/Pdc <= Pout/Pdc whenever Pin >= 0; Pin delivered <= Pavail
    from netgen.pipeline import evaluate

    m = evaluate(load_design(path))
    assert m["settled"]
    assert m["pin_w"] >= 0.0
    assert m["pae"] <= m["drain_efficiency"]
    assert m["pin_w"] <= m["pin_avail_w"] * (1 + 1e-6)  # maximum power transfer (Pozar, sec. 2.6)
    assert 0.0 <= m["pin_port_w"] <= m["pin_avail_w"] * (1 + 1e-6)
    # energy conservation across the input network (common practice) and available = delivered +
    # reflected at f0 (Pozar, sec. 2.6, 11.1): within 1 %
    assert abs(m["input_balance_error"]) < 0.01
    assert abs(m["input_avail_balance_error"]) < 0.01
    assert m["gain_transducer_db"] == pytest.approx(10 * math.log10(m["pout_w"] / m["pin_avail_w"]))
    # the drain current is bounded by the law (Ids <= 2 Ipk (1 + lambda Vds), Angelov et al. 1992) plus
    # small capacitive currents; trapezoidal ringing of the Cout current broke this (docs/devices.md)
    d = load_design(path).device
    assert m["peak_id_a"] < 1.5 * 2 * d.ipk_a * (1 + d.lambda_per_v * m["peak_vd_v"])
    assert m["start"]["method"] == "periodic"  # the collocation estimate (netgen.periodic.collocation)


def test_non_monotonic_gate_function_is_warned():
    # psi' = P1 + 2 P2 u + 3 P3 u^2 has no real root iff P2^2 < 3 P1 P3 (the quadratic's discriminant,
    # textbook algebra); the parameters of the I-V test (P3 < 0) turn the channel back on
    from netgen.results.drive import angelov_warnings

    assert angelov_warnings(design_from_dict(_doc()))  # P3 = -0.05
    assert not angelov_warnings(design_from_dict(_doc(p3=0.05)))
    assert not angelov_warnings(design_from_dict(_doc(p2=0.0, p3=0.0)))
    assert angelov_warnings(design_from_dict(_doc(p2=0.5, p3=0.01)))  # 0.25 > 3 x 1.6 x 0.01
