"""The gate side of the angelov device: its small-signal input impedance at the bias point and
the input network (L-section match, DC block, gate feed) from the drive's source resistance to it.

docs/devices.md ("The input network") states every formula; the netlist is
templates/devices.j2 (macro ``angelov``).
"""

from __future__ import annotations

import math

import numpy as np

from netgen.design import Component, Design
from netgen.errors import DesignError, SizingError

from .builder import FEED_X_RATIO

__all__ = ["angelov_bias_point", "angelov_input_z", "input_loss_ohm", "input_network", "input_network_z", "gate_voltage_ratio", "junction_c", "pozar_l_section"]

#: thermal voltage kT/q at 27 C (SPICE's default temperature), V
VT_V = 0.025865
#: SPICE3 forward-bias depletion-capacitance coefficient FC (its default; the diode models in
#: templates/devices.j2 leave it at the default)
FC = 0.5
#: the gate diodes' saturation current and emission coefficient (templates/devices.j2)
GATE_IS_A, GATE_N = 1e-14, 1.2
#: reactance of the input DC block at f0 in units of Rs. The L-section absorbs it, so it need not be
#: an RF short; a small block keeps the gate-bias time constant R_feed C_block to a few cycles
#: (measured: with |X| = Rs/60 the 1 kohm feed took about 190 cycles per time constant and a
#: class-A run at -20 dBm still drifted 0.5 % after 400 cycles)
BLOCK_X_PER_RS = 1.0


def junction_c(c0_f: float, v: float, vj: float, m: float) -> float:
    """Depletion capacitance of a SPICE3 junction diode at junction voltage ``v`` (V), F.

    ``C = CJO (1 - V/VJ)^-M`` for V < FC VJ, and the linear continuation
    ``CJO (1 - FC)^-(1+M) (1 - FC (1 + M) + M V/VJ)`` above it (SPICE3 diode model, FC = 0.5;
    recalled from memory of the SPICE3 manual).
    """
    if v < FC * vj:
        return c0_f / (1.0 - v / vj) ** m
    return c0_f / (1.0 - FC) ** (1.0 + m) * (1.0 - FC * (1.0 + m) + m * v / vj)


def _ids(dev, vgs: float, vds: float) -> float:
    """The Angelov drain current (docs/devices.md), A."""
    u = vgs - dev.vpk_v
    psi = dev.p1_per_v * u + dev.p2_per_v2 * u * u + dev.p3_per_v3 * u * u * u
    return dev.ipk_a * (1.0 + math.tanh(psi)) * math.tanh(dev.alpha_per_v * vds) * (1.0 + dev.lambda_per_v * vds)


def angelov_bias_point(design: Design) -> dict:
    """The DC operating point of the angelov device (intrinsic voltages, quiescent current).

    The gate sits at device.vgate_bias (no DC gate current: the junctions are reverse biased at
    a class A-C bias), the drain at Vdd through the lossless feed; the quiescent current Iq
    drops Iq Rs and Iq (Rd + Rs): ``Iq = Ids(Vgg - Iq Rs, Vdd - Iq (Rd + Rs))`` solved by
    bisection. Returns ``vgs_v``, ``vds_v`` (intrinsic, V), ``iq_a`` (A).
    """
    dev = design.device
    vgg, vdd = dev.vgate_bias_v, design.vdd_v

    def resid(i: float) -> float:
        return _ids(dev, vgg - i * dev.rs_ohm, vdd - i * (dev.rd_ohm + dev.rs_ohm)) - i

    lo, hi = 0.0, max(2.5 * dev.ipk_a * (1.0 + dev.lambda_per_v * vdd), 1e-12)
    if dev.rd_ohm + dev.rs_ohm > 0:
        hi = min(hi, vdd / (dev.rd_ohm + dev.rs_ohm))
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if resid(mid) > 0 else (lo, mid)
    iq = 0.5 * (lo + hi)
    return {"vgs_v": vgg - iq * dev.rs_ohm, "vds_v": vdd - iq * (dev.rd_ohm + dev.rs_ohm), "iq_a": iq}


def angelov_input_z(design: Design, f_hz: float | None = None, z_drain_ohm: complex | None = None) -> complex:
    """Small-signal input impedance at the gate of the angelov device at its bias point, ohm.

    The device linearised at :func:`angelov_bias_point`: Cgs and Cgd (:func:`junction_c` at
    Vgs - Vcj and Vgd - Vcj) with the diodes' conductances Is/(N Vt) exp(V/(N Vt)), the
    transconductance gm = dIds/dVgs and output conductance gds = dIds/dVds of the Angelov law
    (analytic derivatives), Rs and Rd, the drain terminated in ``z_drain_ohm`` (default Ropt is
    not known here: the caller passes the load the output network presents at f0). Nodal
    analysis with 1 A into the intrinsic gate; Zin = V(gate) + Ri (the gate resistance in series
    with everything behind it). At f0 by default.
    """
    dev = design.device
    w = 2.0 * math.pi * (design.f0_hz if f_hz is None else f_hz)
    bp = angelov_bias_point(design)
    vgs, vds = bp["vgs_v"], bp["vds_v"]
    u = vgs - dev.vpk_v
    psi = dev.p1_per_v * u + dev.p2_per_v2 * u * u + dev.p3_per_v3 * u * u * u
    dpsi = dev.p1_per_v + 2.0 * dev.p2_per_v2 * u + 3.0 * dev.p3_per_v3 * u * u
    th_d = math.tanh(dev.alpha_per_v * vds)
    gm = dev.ipk_a * (1.0 - math.tanh(psi) ** 2) * dpsi * th_d * (1.0 + dev.lambda_per_v * vds)
    gds = dev.ipk_a * (1.0 + math.tanh(psi)) * (dev.alpha_per_v * (1.0 - th_d ** 2) * (1.0 + dev.lambda_per_v * vds)
                                                + th_d * dev.lambda_per_v)
    vgd = vgs - vds

    def y_junction(c0: float, v: float) -> complex:
        vj = v - dev.vcj_v
        g = GATE_IS_A / (GATE_N * VT_V) * math.exp(min(vj / (GATE_N * VT_V), 80.0))
        return g + 1j * w * junction_c(c0, vj, dev.vbi_v, dev.mj)

    ygs, ygd = y_junction(dev.cgs0_f, vgs), y_junction(dev.cgd0_f, vgd)
    zl = complex(z_drain_ohm) if z_drain_ohm is not None else complex(design.load_ohm)
    # nodes: 0 gate, 1 intrinsic source, 2 intrinsic drain, 3 external drain (ground is the reference)
    y = np.zeros((4, 4), dtype=complex)

    def stamp(a: int, b: int | None, adm: complex) -> None:
        y[a, a] += adm
        if b is not None:
            y[b, b] += adm
            y[a, b] -= adm
            y[b, a] -= adm

    big = 1e9  # a zero access resistance: the nodes tied by a large conductance
    stamp(0, 1, ygs)
    stamp(0, 2, ygd)
    stamp(2, 1, gds)
    stamp(1, None, 1.0 / dev.rs_ohm if dev.rs_ohm > 0 else big)
    stamp(2, 3, 1.0 / dev.rd_ohm if dev.rd_ohm > 0 else big)
    stamp(3, None, 1.0 / zl)
    # gm (vg - vs) flows from the intrinsic drain to the intrinsic source through the channel
    y[2, 0] += gm
    y[2, 1] -= gm
    y[1, 0] -= gm
    y[1, 1] += gm
    rhs = np.zeros(4, dtype=complex)
    rhs[0] = 1.0
    return complex(np.linalg.solve(y, rhs)[0]) + dev.ri_ohm


def pozar_l_section(z_load: complex, z0_ohm: float, solution: str) -> tuple[str, float, float]:
    """The L-section matching ``z_load`` to a real ``z0_ohm`` at f0 (Pozar, "Microwave Engineering",
    4th ed., sec. 5.1, L-section matching with lumped elements).

    RL < Z0: the series reactance next to the load, the shunt susceptance at the Z0 side,
    ``X = +-sqrt(RL (Z0 - RL)) - XL``, ``B = +-sqrt((Z0 - RL)/RL)/Z0``.
    RL > Z0: the shunt next to the load, the series at the Z0 side,
    ``B = (XL +- sqrt(RL/Z0) sqrt(RL^2 + XL^2 - Z0 RL))/(RL^2 + XL^2)``,
    ``X = 1/B + XL Z0/RL - Z0/(B RL)``.
    ``solution`` picks the sign: ``lowpass`` the one with B > 0 (shunt capacitor), ``highpass``
    the one with B < 0 (shunt inductor).

    Returns ``(where, x_ohm, b_s)``: ``where`` is ``"shunt_at_source"`` (RL < Z0) or
    ``"shunt_at_load"``; X of the series element (ohm) and B of the shunt element (S).
    """
    rl, xl = z_load.real, z_load.imag
    if rl <= 0:
        raise SizingError(f"drive.match: the device input impedance at f0 has no positive real part ({z_load:.4g} ohm); "
                          "give the input network in [drive.values] or set drive.match = \"none\".")
    sign = 1.0 if solution == "lowpass" else -1.0
    if rl < z0_ohm:
        x = sign * math.sqrt(rl * (z0_ohm - rl)) - xl
        b = sign * math.sqrt((z0_ohm - rl) / rl) / z0_ohm
        return "shunt_at_source", x, b
    root = math.sqrt(rl / z0_ohm) * math.sqrt(rl * rl + xl * xl - z0_ohm * rl)
    cands = [(xl + s * root) / (rl * rl + xl * xl) for s in (1.0, -1.0)]
    pick = [c for c in cands if (c > 0) == (sign > 0) and c != 0.0]
    b = pick[0] if pick else cands[0]
    x = 1.0 / b + xl * z0_ohm / rl - z0_ohm / (b * rl)
    return "shunt_at_load", x, b


def _elem(name_base: str, reactance: float, w: float, how: str, role: str, series: bool) -> Component:
    """An L or C of reactance (series, ohm) or susceptance (shunt, S) at f0."""
    if series:
        if reactance > 0:
            return Component(f"{name_base}_l", "L", reactance / w, f"{how}: series X = {reactance:.6g} ohm, L = X/omega0", role)
        return Component(f"{name_base}_c", "C", 1.0 / (w * -reactance), f"{how}: series X = {reactance:.6g} ohm, C = -1/(omega0 X)", role)
    if reactance > 0:
        return Component(f"{name_base}_c", "C", reactance / w, f"{how}: shunt B = {reactance:.6g} S, C = B/omega0", role)
    return Component(f"{name_base}_l", "L", 1.0 / (w * -reactance), f"{how}: shunt B = {reactance:.6g} S, L = -1/(omega0 B)", role)


def input_network(design: Design, ropt_ohm: float) -> tuple[dict[str, Component], dict[str, tuple]]:
    """The input network of the angelov device (drive.match, drive.bias), source side first.

    The device's input impedance Zdev at f0 (:func:`angelov_input_z`, the drain terminated in
    ``ropt_ohm``, the load the output network presents at f0); with a bias network a DC block
    (reactance Rs/60 at f0, an RF short as the output network's, docs/simulator_notes.md) toward
    the source and a feed at the gate side of it: an RF choke of reactance 60 max(Rs, |Zdev|)
    or the resistor drive.bias_r. The L-section (:func:`pozar_l_section`) matches
    ``Z_block + (Zdev || Z_feed)`` to the source resistance Rs. drive.values override any value.

    Returns ``(components, derived)``: the components in circuit order (roles ``input_match``,
    ``input_block``, ``input_feed``) and derived numbers (``zin_dev_re_ohm``, ``zin_dev_im_ohm``).
    Both empty unless the device is angelov and drive.match or drive.bias is set.
    """
    drv, dev = design.drive, design.device
    if dev.model != "angelov" or (drv.match == "none" and drv.bias == "none"):
        if dev.model != "angelov" and drv.values:
            raise DesignError("drive.values: only the angelov device has an input network; remove [drive.values].")
        if drv.values:
            raise DesignError("drive.values: there is no input network to override (drive.match and drive.bias are "
                              "\"none\"); set drive.match or remove [drive.values].")
        return {}, {}
    w = 2.0 * math.pi * design.f0_hz
    rs = drv.source_r_ohm
    zdev = angelov_input_z(design, z_drain_ohm=ropt_ohm)
    how_z = (f"Zdev = {zdev.real:.4g} {zdev.imag:+.4g}j ohm: the angelov device linearised at its bias point "
             f"(Vgg = {dev.vgate_bias_v:g} V, Vdd = {design.vdd_v:g} V), drain in Ropt = {ropt_ohm:.4g} ohm")
    derived = {"zin_dev_re_ohm": (zdev.real, "ohm", how_z), "zin_dev_im_ohm": (zdev.imag, "ohm", how_z)}
    tail: list[Component] = []
    z_load = zdev
    if drv.bias != "none":
        blk = Component("in_block_c", "C", 1.0 / (w * rs * BLOCK_X_PER_RS),
                        f"|X| = {BLOCK_X_PER_RS:g} Rs = {rs * BLOCK_X_PER_RS:.4g} ohm at f0 (absorbed by the L-section; a small block keeps "
                        "the gate-bias time constant short); C = 1/(omega0 |X|)", "input_block")
        if drv.bias == "choke":
            x_f = FEED_X_RATIO * max(rs, abs(zdev))
            feed = Component("in_feed_l", "L", x_f / w, f"X = {FEED_X_RATIO:g} x max(Rs, |Zdev|) = {x_f:.4g} ohm at f0 (RF choke); L = X/omega0",
                             "input_feed", False)
        else:
            feed = Component("in_feed_r", "R", drv.bias_r_ohm, "set by drive.bias_r (resistor gate feed)", "input_feed", False)
        blk, feed = _override(design, blk), _override(design, feed)
        z_feed = 1j * w * feed.value if feed.kind == "L" else complex(feed.value)
        z_load = 1.0 / (1j * w * blk.value) + (zdev * z_feed) / (zdev + z_feed)
        tail = [blk, feed]
    comps: list[Component] = []
    if drv.match != "none":
        # the series inductor's loss omega0 L/Q (network.inductor_q) is in series with the load
        # where the series element sits next to it: absorbed by re-solving (fixed point)
        q_l = design.network.inductor_q
        r_extra = 0.0
        for _ in range(50):
            where, x, b = pozar_l_section(z_load + r_extra, rs, drv.match)
            new = x / q_l if (where == "shunt_at_source" and x > 0 and math.isfinite(q_l)) else 0.0
            if abs(new - r_extra) <= 1e-12 * rs:
                break
            r_extra = new
        how = (f"L-section {drv.match} from Rs = {rs:.6g} ohm to Z = {z_load.real:.4g} {z_load.imag:+.4g}j ohm "
               f"(the gate side at f0{f', + {r_extra:.4g} ohm series-inductor loss' if r_extra else ''}; Pozar, L-section matching)")
        series = _elem("in_series", x, w, how, "input_match", True)
        shunt = _elem("in_shunt", b, w, how, "input_match", False)
        comps = [shunt, series] if where == "shunt_at_source" else [series, shunt]
    comps = [_override(design, c) for c in comps] + tail
    out = {c.name: c for c in comps}
    unknown = sorted(set(drv.values) - set(out))
    if unknown:
        raise DesignError(f"drive.values.{unknown[0]}: not a part of this input network (it has {', '.join(out)}); "
                          "use one of those names.")
    if drv.bias == "none" and any(c.kind == "L" and c.role == "input_match" and c.name.startswith("in_shunt") for c in comps):
        raise DesignError("drive.match: the highpass L-section's shunt inductor shorts the gate bias the drive source "
                          "carries; set drive.bias = \"choke\" or \"resistor\", or use drive.match = \"lowpass\".")
    if drv.bias == "none" and any(c.kind == "C" and c.name.startswith("in_series") for c in comps):
        raise DesignError("drive.match: the L-section's series capacitor blocks the gate bias the drive source carries; "
                          "set drive.bias = \"choke\" or \"resistor\".")
    return out, derived


def input_loss_ohm(design: Design, comp: Component) -> float:
    """Series loss resistance of an input-network part, ohm: omega0 L / Q for a lossy inductor
    (network.inductor_q, the same parts as the output network), network.capacitor_esr for a
    capacitor, 0 for the feed (its loss is a DC resistance) and the resistor."""
    if not comp.lossy or comp.kind == "R":
        return 0.0
    if comp.kind == "L":
        q = design.network.inductor_q
        return 0.0 if math.isinf(q) else 2.0 * math.pi * design.f0_hz * comp.value / q
    return design.network.capacitor_esr_ohm


def _override(design: Design, comp: Component) -> Component:
    """``comp`` with the value drive.values gives for its name (parsed with its unit)."""
    text = design.drive.values.get(comp.name)
    if text is None:
        return comp
    from netgen.design import parse_quantity

    unit = {"L": "H", "C": "F", "R": "ohm"}[comp.kind]
    value = parse_quantity(text, unit, f"drive.values.{comp.name}")
    if not (value > 0 and math.isfinite(value)):
        raise DesignError(f"drive.values.{comp.name}: {text!r} is not a positive value; give a positive {unit} value.")
    return Component(comp.name, comp.kind, value, "set in [drive.values]", comp.role, comp.lossy)


def input_network_z(design: Design, comps: dict[str, Component], zdev_ohm: complex, f_hz: float | None = None) -> complex:
    """Impedance the source resistance sees looking into the input network terminated by the
    device's ``zdev_ohm``, ohm: the check of the match (Zin = Rs at f0). Each lossy part has its
    series loss (:func:`input_loss_ohm`), as rendered."""
    w = 2.0 * math.pi * (design.f0_hz if f_hz is None else f_hz)

    def z_of(c: Component) -> complex:
        z = 1j * w * c.value if c.kind == "L" else (1.0 / (1j * w * c.value) if c.kind == "C" else complex(c.value))
        return z + input_loss_ohm(design, c)

    z = complex(zdev_ohm)
    if "in_block_c" in comps:
        zf = z_of(comps["in_feed_l"] if "in_feed_l" in comps else comps["in_feed_r"])
        z = z_of(comps["in_block_c"]) + z * zf / (z + zf)
    for c in reversed([c for c in comps.values() if c.role == "input_match"]):
        zc = z_of(c)
        z = z + zc if c.name.startswith("in_series") else z * zc / (z + zc)
    return z


def gate_voltage_ratio(design: Design, comps: dict[str, Component], zdev_ohm: complex) -> complex:
    """V(gate) / Vs at f0 through the source resistance and the input network (its losses
    included) into the device's ``zdev_ohm``: the impedances of :func:`input_network_z` walked
    from the source to the gate (a series part divides the voltage, a shunt part leaves it)."""
    w = 2.0 * math.pi * design.f0_hz

    def z_of(c: Component) -> complex:
        z = 1j * w * c.value if c.kind == "L" else (1.0 / (1j * w * c.value) if c.kind == "C" else complex(c.value))
        return z + input_loss_ohm(design, c)

    # the chain from the gate outward: (kind, impedance), each entry with the impedance seen beyond it
    chain = []
    z = complex(zdev_ohm)
    if "in_block_c" in comps:
        zf = z_of(comps["in_feed_l"] if "in_feed_l" in comps else comps["in_feed_r"])
        z = z * zf / (z + zf)
        chain.append(("series", z_of(comps["in_block_c"]), z))
        z = z + z_of(comps["in_block_c"])
    for c in reversed([c for c in comps.values() if c.role == "input_match"]):
        zc = z_of(c)
        if c.name.startswith("in_series"):
            chain.append(("series", zc, z))
            z = z + zc
        else:
            z = z * zc / (z + zc)
    ratio = z / (z + design.drive.source_r_ohm)
    for kind, zc, z_beyond in reversed(chain):
        ratio *= z_beyond / (z_beyond + zc)
    return ratio
