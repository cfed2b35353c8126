"""The input side of a driven device: available and delivered drive power, gains (metrics.json).

See docs/metrics.md (pin_avail_w, pin_dbm, gain_transducer_db, gain_power_db, input_mismatch_db)
and docs/devices.md (the angelov device's gate drive).
"""

from __future__ import annotations

import math
import re

import numpy as np

from netgen.periodic import fourier

__all__ = ["angelov_warnings", "conduction_angle_deg", "drive_metrics", "input_side", "input_warnings"]

#: a drain current above this fraction of its peak counts as conducting (conduction_angle_deg)
CONDUCTION_THRESHOLD = 0.01

_RLIN = re.compile(r"^(RLIN_\S+)\s+(\S+)\s+(\S+)\s+(\S+)", re.IGNORECASE | re.MULTILINE)


def _f(x) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _db(ratio: float) -> float | None:
    return 10.0 * math.log10(ratio) if ratio > 0 and math.isfinite(ratio) else None


def drive_metrics(design, pout_w: float, pin_w: float | None) -> dict:
    """The input side of a device driven from a source with a resistance (the angelov device's
    [drive]): available power, delivered power, transducer and power gain.

    Pavail = |Vs|^2 / (8 Rs) (maximum power transfer, Pozar "Microwave Engineering", 4th ed., sec. 2.6);
    transducer gain G_T = Pout / Pavail, power gain G_P = Pout / Pin (``pin_w``: the power delivered
    into the amplifier's input, the input port of the input network, the gate without one; the
    same text, sec. 12.1). Gains in dB; null where the device has no such drive.
    """
    if design.device.model != "angelov":
        return {"pin_avail_w": None, "pin_avail_dbm": None, "pin_dbm": None,
                "gain_transducer_db": None, "gain_power_db": None, "input_mismatch_db": None}
    pav = design.drive.pin_avail_w
    pin_ok = pin_w is not None and pin_w > 0
    return {
        "pin_avail_w": _f(pav),
        "pin_avail_dbm": _f(design.drive.pin_dbm),
        "pin_dbm": _f(10.0 * math.log10(pin_w / 1e-3)) if pin_ok else None,
        "gain_transducer_db": _db(pout_w / pav) if pout_w > 0 else None,
        "gain_power_db": _db(pout_w / pin_w) if (pin_ok and pout_w > 0) else None,
        # power the source could give but the gate reflects: 10 log10(Pavail / Pin) >= 0
        "input_mismatch_db": _db(pav / pin_w) if pin_ok else None,
    }


def angelov_warnings(design) -> list[str]:
    """A gate function psi(u) = P1 u + P2 u^2 + P3 u^3 that is not monotonic turns the channel back
    on at large negative (or positive) gate swing, an artefact of the polynomial outside its fitted
    range; psi' = P1 + 2 P2 u + 3 P3 u^2 > 0 for every u needs P2 = P3 = 0 or P3 > 0 and
    P2^2 < 3 P1 P3 (the discriminant of psi'; docs/devices.md)."""
    dev = design.device
    if dev.model != "angelov":
        return []
    p1, p2, p3 = dev.p1_per_v, dev.p2_per_v2, dev.p3_per_v3
    if (p2 == 0.0 and p3 == 0.0) or (p3 > 0.0 and p2 * p2 < 3.0 * p1 * p3):
        return []
    return [f"the angelov gate function psi is not monotonic (P1 = {p1:g}, P2 = {p2:g}, P3 = {p3:g}): the channel turns "
            "back on for a large gate swing; check that the swing stays where the parameters were fitted, or choose "
            "P3 > 0 with P2^2 < 3 P1 P3 (docs/devices.md)"]


def conduction_angle_deg(i_a: np.ndarray, threshold: float = CONDUCTION_THRESHOLD) -> float | None:
    """Conduction angle of a drain (channel) current over whole periods, degrees: 360 x the
    fraction of the period in which the current exceeds ``threshold`` x its peak (Cripps, "RF Power
    Amplifiers for Wireless Communications", 2nd ed., ch. 3, reduced conduction angle: 360 deg
    class A, 180 deg class B, less for class C). Samples of the uniform grid, each crossing placed
    by linear interpolation between its two samples. None for a current without a positive peak.
    """
    i = np.asarray(i_a, dtype=float)
    peak = float(np.max(i)) if i.size else 0.0
    if not (peak > 0 and math.isfinite(peak)):
        return None
    x = i - threshold * peak
    nxt = np.roll(x, -1)
    on = np.where(x > 0, 1.0, 0.0)
    # a step that crosses the threshold counts the part of it above, by linear interpolation
    cross = (x > 0) != (nxt > 0)
    den = np.where(cross, x - nxt, 1.0)
    frac = np.where(cross, np.where(x > 0, x / den, -nxt / den), 0.0)
    share = np.where(cross, frac, 0.5 * (on + np.where(nxt > 0, 1.0, 0.0)))
    return float(360.0 * np.mean(share))


def _loss_lines(netlist_text: str):
    for m in _RLIN.finditer(netlist_text):
        yield m.group(1), m.group(2).lower(), m.group(3).lower(), float(m.group(4))


def input_side(win, exact: dict, wf, design, netlist_text: str, pin_gate_w: float | None, pout_w: float,
               vl1: complex, periods: int) -> dict:
    """The input port of a driven angelov device (metrics.json; docs/metrics.md): the power into the
    amplifier's input, its fundamental, the reflected power, the input network's loss, the two
    power balances and AM-PM.

    ``pin_port_w``: mean of v(gin) i_source over the averaged periods (the source's current into the
    port; the gate node and current without an input network). The fundamental: V1, I1 at the port
    (exact Fourier coefficients), Zin = V1/I1, Gamma = (Zin - Rs)/(Zin + Rs), the reflected
    power Pavail |Gamma|^2, P1 = Re(V1 I1*)/2, and ``input_avail_balance_error`` =
    (Pavail - P1 - Pavail |Gamma|^2)/Pavail (Pozar, "Microwave Engineering", sec. 2.6 and 11.1: the
    available power splits into the delivered and the reflected). ``input_network_loss_w`` is the mean
    dissipation in the RLIN_* loss resistors and the resistor feed; ``input_balance_error`` =
    (pin_port + P_bias - Pin_gate - loss)/pin_port with P_bias = Vgg x the gate's DC current (the
    bias supply's power; no DC flows through the block). AM-PM: the phase of the load's fundamental
    relative to the source's open-circuit voltage Vs1 = V1 + Rs I1 (the incident wave), degrees.
    """
    none = {"pin_port_w": None, "input_reflected_w": None, "input_return_loss_db": None, "input_network_loss_w": None,
            "input_avail_balance_error": None, "input_balance_error": None, "am_pm_deg": None,
            "zin_port_re_ohm": None, "zin_port_im_ohm": None}
    if design.device.model != "angelov" or "source" not in win.i:
        return none
    port = "gin" if "gin" in win.v else "gate"
    v_port, i_src = win.v[port], win.i["source"]
    pin_port = win.mean_product(v_port, i_src)
    v1 = exact.get("gin_v" if port == "gin" else "gate_v")
    v1 = v1[1] if v1 is not None else fourier(np.asarray(wf.v[port], float), periods, 1)[1]
    i1 = exact.get("gate_i")
    i1 = i1[1] if i1 is not None else fourier(np.asarray(wf.i["source"], float), periods, 1)[1]
    rs = design.drive.source_r_ohm
    pav = design.drive.pin_avail_w
    out = dict(none, pin_port_w=float(pin_port))
    if abs(i1) > 0:
        zin = v1 / i1
        gam = (zin - rs) / (zin + rs)
        p_refl = pav * abs(gam) ** 2
        p1 = 0.5 * (v1 * np.conj(i1)).real
        out.update(zin_port_re_ohm=float(zin.real), zin_port_im_ohm=float(zin.imag), input_reflected_w=float(p_refl),
                   input_return_loss_db=(float(-20.0 * math.log10(abs(gam))) if abs(gam) > 0 else None),
                   input_avail_balance_error=float((pav - p1 - p_refl) / pav) if pav > 0 else None)
    vs1 = v1 + rs * i1
    if abs(vs1) > 0 and abs(vl1) > 0:
        out["am_pm_deg"] = float(np.degrees(np.angle(vl1 / vs1)))
    loss = 0.0
    for name, a, b, r in _loss_lines(netlist_text):
        dv = win.node(a, name) - win.node(b, name)
        loss += win.mean_product(dv, dv) / r
    p_bias = 0.0
    net = design.drive
    vgg = design.device.vgate_bias_v
    if net.bias != "none" and "gx" in win.v:
        if net.bias == "resistor":
            r_f = _feed_r(netlist_text)
            dv = vgg - win.v["gx"]
            loss += win.mean_product(dv, dv) / r_f
        if "gate" in win.i:
            ones = np.ones_like(win.i["gate"])
            p_bias = vgg * win.mean_product(ones, win.i["gate"])
    out["input_network_loss_w"] = float(loss)
    if pin_gate_w is not None and abs(pin_port) > 0:
        out["input_balance_error"] = float((pin_port + p_bias - pin_gate_w - loss) / abs(pin_port))
    return out


def _feed_r(netlist_text: str) -> float:
    m = re.search(r"^R_in_feed\s+\S+\s+\S+\s+(\S+)", netlist_text, re.IGNORECASE | re.MULTILINE)
    return float(m.group(1)) if m else math.inf


def input_warnings(metrics: dict) -> list[str]:
    """A negative resistance at the input port at f0 (Re Zin < 0: the port gives power back to the
    source) marks a stage that may oscillate (common practice: a stable two-port shows a positive
    input resistance for a passive source); or an input balance that does not close within 1 %."""
    out = []
    r = metrics.get("zin_port_re_ohm")
    if r is not None and r < 0:
        out.append(f"the input port shows a negative resistance at f0 (Re Zin = {r:.3g} ohm): the stage may oscillate "
                   "through the gate-drain coupling; add loss at the gate (drive.bias = \"resistor\" with a lower "
                   "drive.bias_r) or lower the input match's Q")
    err = metrics.get("input_balance_error")
    if err is not None and abs(err) > 0.01 and metrics.get("settled"):
        out.append(f"the input power balance misses {100 * err:.2g} % (power into the input port against the gate's "
                   "and the input network's): raise sim.points_per_cycle")
    return out
