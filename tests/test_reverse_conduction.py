"""Reverse conduction of the switch device (device.reverse_conduction; issue 13 item 12).

A real switch conducts in reverse when its drain is driven below the source: a MOSFET through its
body diode (or its channel), a GaN HEMT through its channel; so the drain of a mistuned class-E
stage clamps one diode drop below ground instead of swinging far negative (body-diode behaviour,
common practice; the 0.7 V default is a silicon pn junction's forward drop, common practice).
The model is piecewise linear: no current above -Vf, then 1/R (docs/devices.md).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from netgen.design import design_from_dict
from netgen.design.keys import set_dotted
from netgen.errors import DesignError
from netgen.netlist import cards as netlist_cards
from netgen.netlist.portable import check_portable
from netgen.netlist.renderer import render
from netgen.periodic import device as periodic_device
from netgen.periodic import estimator
from netgen.synthesis.sizing import size

SIMS = Path(__file__).resolve().parents[1] / "sims"
CLASS_E = SIMS / "class_e.toml"


def _doc(path: Path = CLASS_E) -> dict:
    return tomllib.loads(path.read_text(encoding="utf-8"))


def _design(changes: dict, path: Path = CLASS_E, pin: bool = False):
    doc = _doc(path)
    if pin:  # the network sized for the nominal load, kept while the load moves (a sweep's fixed network)
        from netgen.studies.plan import pin_network

        doc = pin_network(doc, design_from_dict(doc, path))
    for key, value in changes.items():
        doc = set_dotted(doc, key, value)
    return design_from_dict(doc, path)


# ---------------------------------------------------------------- the netlist


def test_switch_carries_a_diode_by_default_in_both_dialects():
    sized = size(_design({}))
    text = render(sized, mode="tran")
    (brev,) = [line for line in text.splitlines() if line.startswith("BREV ")]
    # default: Vf 0.7 V, R = device.ron = 0.1 ohm -> 10 S
    assert brev == "BREV dsw 0 I=-10*uramp(-0.7-v(dsw))"
    portable = render(sized, mode="tran", dialect="portable")
    assert "BREV dsw 0 I=-10*uramp(-0.7-v(dsw))" in portable
    assert check_portable(portable) == []  # a SPICE3 B source with uramp only (docs/portable_dialect.md)
    custom = render(size(_design({"device.diode_vf": "1.2 V", "device.diode_ron": "0.5 ohm"})), mode="tran")
    assert "BREV dsw 0 I=-2*uramp(-1.2-v(dsw))" in custom


def test_none_gives_the_netlist_without_the_diode():
    with_diode = render(size(_design({})), mode="tran").splitlines()
    without = render(size(_design({"device.reverse_conduction": "none"})), mode="tran").splitlines()
    assert not any(line.startswith("BREV") for line in without)
    kept = [line for line in with_diode if not line.startswith("BREV") and "reverse conduction" not in line]
    strip = [line for line in without if not line.startswith("*")]  # the header names the design's keys' digest
    assert [line for line in kept if not line.startswith("*")] == strip


def test_a_wrong_choice_names_the_key():
    with pytest.raises(DesignError, match=r"device\.reverse_conduction: 'body' is not one of diode, none"):
        _design({"device.reverse_conduction": "body"})


# ---------------------------------------------------------------- the periodic estimate


@pytest.mark.parametrize("expr, expect", [
    ("-10*uramp(-0.7-v(dsw))", (0.7, 10.0)),
    ("10*(v(dsw)+0.7)*u(-0.7-v(dsw))", (0.7, 10.0)),   # the same law in another form
    ("-uramp(-v(dsw))/0.05", (0.0, 20.0)),             # an ideal-knee diode, 20 S
    ("v(dsw)*1e-3", None),                              # a resistor: conducts both ways
    ("-10*uramp(-0.7-v(dsw))*v(ctrl)", None),           # depends on another node
    ("-10*uramp(-0.7-v(dsw))*(1+0*time)", None),        # depends on time
])
def test_reverse_diode_is_read_by_its_law(expr, expect):
    (card,) = [c for c in netlist_cards.read_cards(f"t\nBREV dsw 0 I={expr}\n.end\n") if c.name == "BREV"]
    got = periodic_device.reverse_diode(card)
    if expect is None:
        assert got is None
    else:
        assert got == pytest.approx(expect, rel=1e-9)


def _resistive_clamp(vf_v=0.7, rd_ohm=0.5, r_ohm=10.0, amp_v=10.0):
    """A sine behind R into dsw; the switch on for 1 % of the period at the positive peak; the diode."""
    period = 1e-6
    text = f"""resistive clamp
VS src 0 SIN(0 {amp_v} 1e6)
RS src dsw {r_ohm}
S_SW dsw 0 ctrl 0 SWMOD
.model SWMOD SW(RON=1 ROFF=1e12 VT=0.5 VH=0.25)
VCTRL ctrl 0 PULSE(0 1 {0.245 * period} 1n 1n {0.01 * period} {period})
RCTRL ctrl 0 1e6
BREV dsw 0 I=-{1 / rd_ohm}*uramp(-{vf_v}-v(dsw))
.tran 1n 3u 0 1n uic
.end
"""
    return text, period


def test_estimate_of_a_resistive_clamp_matches_kirchhoff():
    # No reactive part: at each instant (vs - v)/R = G (v + Vf) below -Vf (Kirchhoff's current law
    # with the piecewise-linear diode, common practice), so the negative peak of v is
    # (-A/R - G Vf)/(1/R + G) and v = vs where the diode and switch are off.
    vf, rd, r, amp = 0.7, 0.5, 10.0, 10.0
    text, period = _resistive_clamp(vf, rd, r, amp)
    state = estimator.estimate(text, 1e6, 1000)
    g = 1.0 / rd
    v_min = (-amp / r - g * vf) / (1.0 / r + g)
    # 1e-5: straight lines between the grid points (half a step off the instant here) of a sine
    assert float(state.at("dsw", 0.75 * period)) == pytest.approx(v_min, rel=1e-5)
    t = np.array([0.05, 0.1, 0.45, 0.5]) * period  # vs between -Vf and the switch's pulse: v = vs
    assert state.at("dsw", t) == pytest.approx(amp * np.sin(2 * np.pi * t / period), rel=1e-5, abs=1e-4)
    assert float(state.series["dsw"].min()) >= v_min - 1e-9


@pytest.mark.ngspice
def test_resistive_clamp_in_ngspice_matches_kirchhoff():
    from netgen.simulator import engine

    vf, rd, r, amp = 0.7, 0.5, 10.0, 10.0
    text, period = _resistive_clamp(vf, rd, r, amp)
    v = engine.run_transient(text, save=["dsw"])
    g = 1.0 / rd
    v_min = (-amp / r - g * vf) / (1.0 / r + g)
    assert float(np.interp(2.75 * period, v["time"], v["dsw"])) == pytest.approx(v_min, rel=1e-4)


# ---------------------------------------------------------------- class E on a VSWR-3 load


#: a VSWR-3 point of the 50 ohm circle at phase 270 deg: Gamma = -0.5j, Z = 50 (1 + Gamma)/(1 - Gamma)
#: = 30 - j40 ohm (Pozar); the nominal network kept
VSWR3_270 = {"design.load": "30 ohm", "design.load_x": "-40 ohm"}


@pytest.mark.ngspice
@pytest.mark.slow
def test_class_e_on_a_vswr3_load_clamps_near_minus_vf_and_none_restores_the_swing():
    from netgen.pipeline import run_design

    clamped = run_design(_design(VSWR3_270, pin=True), None, plots=False).metrics
    free = run_design(_design({**VSWR3_270, "device.reverse_conduction": "none"}, pin=True), None, plots=False).metrics
    # without a reverse path the drain swings far below ground (measured -65 V at Vdd = 24 V)
    assert free["min_vd_v"] < -40.0
    # with the body diode it stops about one drop below ground: -Vf - I R (0.7 V + a few A x 0.1 ohm)
    assert -2.0 < clamped["min_vd_v"] < -0.7
    # and the device no longer dissipates watts in an off state that swings (3.9 W measured -> 0.26 W)
    assert clamped["device_dissipation_w"] < 0.25 * free["device_dissipation_w"]
    for m in (clamped, free):
        assert m["settled"] and m["cycles"] <= 10  # started on the estimate: 6 cycles each (measured)
        assert m["start"]["method"] == "periodic"
        assert m["start"]["estimate_deviation"] < 1e-3  # the estimate within 0.1 % of ngspice


def test_estimate_with_the_diode_conducting_all_period_matches_kirchhoff():
    # a -5 V source behind 10 ohm holds the drain below -Vf all period (the switch barely on):
    # (vs - v)/R = G (v + Vf) + g_sw v gives v = (vs/R - G Vf)/(1/R + G) (Kirchhoff, common
    # practice; g_sw = 1e-6 S while on shifts it by under 1e-6 relative)
    text = """diode on all period
VS src 0 DC -5
RS src dsw 10
C1 dsw 0 1n
S_SW dsw 0 ctrl 0 SWMOD
.model SWMOD SW(RON=1e6 ROFF=1e12 VT=0.5 VH=0.25)
VCTRL ctrl 0 PULSE(0 1 0 1n 1n 400n 1u)
RCTRL ctrl 0 1e6
BREV dsw 0 I=-2*uramp(-0.7-v(dsw))
.tran 1n 3u 0 1n uic
.end
"""
    state = estimator.estimate(text, 1e6, 200)
    v = (-5.0 / 10.0 - 2.0 * 0.7) / (1.0 / 10.0 + 2.0)
    assert state.series["dsw"] == pytest.approx(np.full(200, v), rel=1e-6)
