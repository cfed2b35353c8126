"""One sizing function per built-in topology: ``sizer(builder, ropt_ohm)`` adds the network's parts.

Registered in :mod:`netgen.synthesis.topologies`; the formulas they use live in
:mod:`netgen.synthesis.builder`, each part's source in its ``how`` text.
"""

from __future__ import annotations

import math

from netgen.errors import SizingError

from .builder import (
    E_EXCESS_K,
    E_FEED_X_RATIO,
    E_SHUNT_K,
    Builder,
    add_load_reactance,
    l_section,
    resonator_z,
)
from .intrinsic import compensator_plan, f0_target_admittance, parasitics

__all__ = ["size_class_f_line", "size_class_f_feed", "size_class_f_lumped", "size_inverse_f_line", "size_class_e",
           "size_class_b_tuned"]


_SRC_INTRINSIC = ("the intrinsic plane: the generator inside Cout sees Ropt at f0 (Cripps, 'RF Power Amplifiers "
                  "for Wireless Communications'; Grebennikov, 'RF and Microwave Power Amplifier Design'; recalled from memory)")


def absorb_parasitics(b: Builder, wave_class: str, ropt: float, feed_at_drain: bool = True) -> complex | None:
    """Add the Cout/package compensator at the drain and return the f0 admittance the rest must present, S.

    ``None`` when the device has no output capacitance and no package (the network is sized
    for Ropt as it always was). The compensator (:func:`netgen.synthesis.intrinsic.compensator_plan`,
    Foster's reactance theorem) resonates Cout at the controlled harmonics; the f0 target is
    Ropt de-embedded through Cout, Ld and Cp, less the compensator's and the feed choke's
    susceptance (:func:`netgen.synthesis.intrinsic.f0_target_admittance`).
    """
    d = b.design
    par = parasitics(d)
    if not par.any:
        return None
    known = None
    if feed_at_drain:
        l_feed = next(c.value for c in b.items if c.name == "feed_l")

        def known(f_hz: float) -> float:  # the feed choke at the drain terminal, S
            return -1.0 / (2 * math.pi * f_hz * l_feed)
    plan = compensator_plan(d, wave_class, ropt, known) if wave_class in ("F", "invF") else []
    targets = "odd harmonics 3f0.." if wave_class == "F" else "even harmonics 2f0.."
    for k, (fr, lval) in enumerate(plan, start=1):
        what = (f"series resonance {fr / d.f0_hz:g} f0" if fr >= d.f0_hz else
                f"a shunt inductor behind a DC block (series resonance {fr / d.f0_hz:g} f0)")
        src = (f"Cout compensator branch {k} ({what}): with the other branches it cancels Cout = {par.cout_f:.4g} F, "
               f"Ld = {par.ld_h:.4g} H, Cp = {par.cp_f:.4g} F at the {targets} and at f0  "
               "(Foster's reactance theorem, 1924; harmonic traps per Grebennikov, recalled from memory)")
        b.add(f"comp{k}_l", "L", lval, f"{src}: L = 1/g from the K x K susceptance solve", "comp")
        b.add(f"comp{k}_c", "C", 1.0 / ((2 * math.pi * fr) ** 2 * lval), f"{src}: C = 1/(omega_k^2 L)", "comp")
    extra = known(d.f0_hz) if known else 0.0
    return f0_target_admittance(d, ropt, plan, extra)


def past_block(b: Builder, y: complex, name: str = "block_c") -> complex:
    """The admittance ``y`` wanted at the drain, moved past the series DC block ``name``:
    ``1/(1/y + j/(omega0 C))`` (series element, circuit theory). The block's small reactance
    matters once the target carries a large susceptance (a high drain Q from Cout)."""
    c = next(c.value for c in b.items if c.name == name)
    return 1.0 / (1.0 / y + 1j / (b.w0 * c))


def size_class_f_line(b: Builder, ropt: float) -> None:
    """Class F with a quarter-wave series line and a parallel f0 tank at the load.

    Choke at the drain, DC block, line Z0 = sqrt(Ropt RL), TD = 1/(4 f0), tank across RL
    (loaded Q relative to RL): odd harmonics see an open and even harmonics a short at the
    drain (Pozar, the quarter-wave transformer; Raab 1997).
    """
    d = b.design
    b.feed(ropt)
    b.block(ropt)
    y = absorb_parasitics(b, "F", ropt)
    rl = d.load_ohm
    if y is None:
        b.quarter_wave("line", math.sqrt(ropt * rl),
                       f"Z0 = sqrt(Ropt RL) = sqrt({ropt:.6g} x {rl:.6g}) (Pozar, quarter-wave transformer)")
        b.parallel_tank("tank", rl, d.network.loaded_q, "RL")
    else:
        # Zin = Z0^2/Z_L (Pozar): the line presents Y = G + jB when the load end shows
        # Z_L = Z0^2 Y, i.e. Z0^2 = RL G/|Y|^2 and a tank re-tuned to B_t = -B/(RL G)
        y = past_block(b, y)
        g, bb = y.real, y.imag
        z0 = math.sqrt(rl * g) / abs(y)
        b.quarter_wave("line", z0, f"Z0 = sqrt(RL G)/|Y| = {z0:.6g} ohm, Y = {g:.6g} {bb:+.6g}j S the f0 target at the "
                                   f"drain terminal ({_SRC_INTRINSIC}; Pozar, quarter-wave transformer)")
        b.tuned_tank("tank", rl, d.network.loaded_q, "RL", -bb / (rl * g), "B_t = -B/(RL G) (the target's reactive part)")
    add_load_reactance(b)


def size_class_f_feed(b: Builder, ropt: float) -> None:
    """Class F with a quarter-wave line as the DC feed.

    Supply choke -> RF bypass C (an RF short, reactance Ropt/60 at f0) -> quarter-wave line
    (Z0 = Ropt) -> drain: shorted at its supply end, the line is an open at odd and a short
    at even harmonics (common practice). Output: DC block, series f0 resonator (loaded Q
    relative to Ropt), L-section Ropt -> RL.
    """
    d = b.design
    b.feed(ropt)
    b.block(ropt, name="bypass_c")
    b.quarter_wave("feedline", ropt, f"Z0 = Ropt = {ropt:.6g} ohm (our choice: a line of the drain impedance; any Z0 gives the odd/even open/short)", role="feed_line")
    y = absorb_parasitics(b, "F", ropt, feed_at_drain=False)
    b.block(ropt)
    if y is None:
        b.series_resonator("res", ropt, d.network.loaded_q, "Ropt")
        l_section(b, ropt, 0.0, d.load_ohm, f"Ropt = {ropt:.6g} ohm")
    else:
        zt = 1.0 / past_block(b, y)
        b.series_resonator("res", zt.real, d.network.loaded_q, "the f0 target")
        l_section(b, zt.real, zt.imag, d.load_ohm, f"{zt.real:.6g} {zt.imag:+.6g}j ohm ({_SRC_INTRINSIC})",
                  force=abs(zt.imag) > 1e-9 * zt.real)
    add_load_reactance(b)


def size_class_f_lumped(b: Builder, ropt: float) -> None:
    """Lumped class F: parallel resonators at 3f0..(2N+1)f0 in series, shunt f0 tank, match.

    Resonator n: characteristic impedance Zr, L = Zr/omega_n, C = 1/(Zr omega_n). Zr is
    network.resonator_z, or by default :func:`lumped_resonator_z`: the resonators are inductive
    at the even harmonics (reactance Zr S_m) and open at the odd ones (Q_r Zr), so Zr is chosen
    where the even short and the odd open are equally far from Ropt (Zr^2 S Q_r = Ropt^2;
    about 0.1 Ropt). With Zr = Ropt, as before, the drain saw |Z(2f0)| ~ 1.5 Ropt: no class F.
    Their net reactance at f0,
    X = sum omega0 L_n / (1 - (f0/f_n)^2), is absorbed by the L-section, which is sized to
    present Ropt - jX at its input so the drain sees Ropt (Pozar, L-section matching).
    """
    d = b.design
    b.feed(ropt)
    y = absorb_parasitics(b, "F", ropt)
    b.block(ropt)
    zr, how_zr = resonator_z(d, ropt)
    x_tanks = 0.0
    for k in range(1, d.network.harmonics + 1):
        n = 2 * k + 1
        wn = n * b.w0
        src = f"parallel resonator at {n} f0, Zr = {zr:.6g} ohm ({how_zr})"
        b.add(f"res{n}_l", "L", zr / wn, f"{src}: L = Zr/omega_n", "resonator")
        b.add(f"res{n}_c", "C", 1.0 / (zr * wn), f"{src}: C = 1/(Zr omega_n)", "resonator")
        x_tanks += b.w0 * (zr / wn) / (1.0 - (1.0 / n) ** 2)
    if y is None:
        b.parallel_tank("tank", ropt, d.network.loaded_q, "Ropt")
        l_section(b, ropt, -x_tanks, d.load_ohm, f"Ropt - j{x_tanks:.6g} ohm", force=True)
    else:
        zt = 1.0 / past_block(b, y)
        b.parallel_tank("tank", zt.real, d.network.loaded_q, "the f0 target")
        l_section(b, zt.real, zt.imag - x_tanks, d.load_ohm,
                  f"{zt.real:.6g} {zt.imag - x_tanks:+.6g}j ohm (the f0 target less the resonators; {_SRC_INTRINSIC})", force=True)
    add_load_reactance(b)


def size_inverse_f_line(b: Builder, ropt: float) -> None:
    """Inverse class F: choke, block, quarter-wave line Z0 = sqrt(Ropt RL), series f0 resonator + RL.

    The series resonator (loaded Q relative to RL) is a short at f0, so the drain sees
    Z0^2/RL = Ropt; at harmonics it is a high impedance, so the line end is nearly open:
    short at odd and open at even harmonics at the drain (Pozar, quarter-wave transformer).
    """
    d = b.design
    b.feed(ropt)
    b.block(ropt)
    y = absorb_parasitics(b, "invF", ropt)
    rl = d.load_ohm
    if y is None:
        b.quarter_wave("line", math.sqrt(ropt * rl),
                       f"Z0 = sqrt(Ropt RL) = sqrt({ropt:.6g} x {rl:.6g}) (Pozar, quarter-wave transformer)")
        b.series_resonator("res", rl, d.network.loaded_q, "RL")
    else:
        # Zin = Z0^2/(RL + jX) (Pozar): Y = (RL + jX)/Z0^2, so Z0^2 = RL/G and the series
        # resonator is re-tuned to X = B RL/G at f0 (its harmonic opens only grow)
        y = past_block(b, y)
        g, bb = y.real, y.imag
        z0 = math.sqrt(rl / g)
        x = bb * rl / g
        b.quarter_wave("line", z0, f"Z0 = sqrt(RL/G) = {z0:.6g} ohm, G = {g:.6g} S the f0 target's conductance "
                                   f"({_SRC_INTRINSIC}; Pozar, quarter-wave transformer)")
        q = d.network.loaded_q
        xl = q * rl + max(x, 0.0)
        src = f"series resonator at f0, loaded Q={q:g} with RL, re-tuned to X = B RL/G = {x:.6g} ohm (the f0 target's susceptance)"
        b.add("res_l", "L", xl / b.w0, f"{src}: L = (Q RL + max(X, 0))/omega0", "resonator")
        b.add("res_c", "C", 1.0 / (b.w0 * (xl - x)), f"{src}: C = 1/(omega0 (omega0 L - X))", "resonator")
    add_load_reactance(b)


def size_class_e(b: Builder, r_ohm: float) -> None:
    """Class E (Sokal & Sokal 1975; Raab 1977), 50 % duty, shunt C only.

    Shunt C = 0.1836/(omega0 R) minus the device Cout; series L0-C0 at f0 with loaded Q
    relative to R (L0 = Q R/omega0); excess series reactance 1.1525 R as an extra series L;
    L-section R -> RL.
    """
    d = b.design
    # Sokal's equations assume an ideal RF choke. A finite choke in parallel with the shunt C
    # cancels part of its susceptance at f0 (a 60 R choke: 9 %, enough to lose zero-voltage
    # switching), so class E gets a larger choke (300 R) and the shunt C is raised by the
    # choke's susceptance 1/(omega0^2 L_feed) at f0.
    b.feed(r_ohm, ratio=E_FEED_X_RATIO)
    l_feed = next(c.value for c in b.items if c.name == "feed_l")
    c_sokal = E_SHUNT_K / (b.w0 * r_ohm)
    c_total = c_sokal + 1.0 / (b.w0**2 * l_feed)
    par = parasitics(d)
    c_dev = par.cout_f + par.cp_f
    c_shunt = c_total - c_dev
    if c_shunt <= 0:
        from .intrinsic import class_e_fmax_hz

        fmax = class_e_fmax_hz(r_ohm, c_dev)
        raise SizingError(
            f"device.cout: {c_dev:.4g} F (Cout + package Cp) is not below the class-E shunt capacitance "
            f"0.1836/(omega0 R) = {c_total:.4g} F: class E absorbs it only up to fmax = 0.1836/(2 pi R C) = "
            f"Imax/(56.5 C Vdd) = {fmax:.4g} Hz (Sokal 1975; Raab 1977); lower design.f0 or design.pout, raise design.vdd "
            "or use a smaller device."
        )
    pkg = " (device.package_l is not absorbed by class E: it sits between Cout and this capacitor)" if par.ld_h > 0 else ""
    b.add("shunt_c", "C", c_shunt,
          f"class-E shunt C = 0.1836/(omega0 R) + 1/(omega0^2 L_feed) - Cout - Cp = {c_sokal:.6g} + "
          f"{c_total - c_sokal:.6g} - {c_dev:.6g} F (Sokal & Sokal 1975; choke compensation at f0){pkg}", "shunt")
    q = d.network.loaded_q
    l0 = q * r_ohm / b.w0
    b.add("series_c", "C", 1.0 / (b.w0**2 * l0), "series resonator C0 = 1/(omega0^2 L0) (also the DC block)", "block")
    b.add("series_l", "L", l0, f"series resonator L0 = Q R/omega0, loaded Q={q:g}, R = {r_ohm:.6g} ohm", "resonator")
    b.add("excess_l", "L", E_EXCESS_K * r_ohm / b.w0, "class-E excess reactance X = 1.1525 R at f0 (Sokal & Sokal 1975; Raab 1977)", "series")
    l_section(b, r_ohm, 0.0, d.load_ohm, f"R = {r_ohm:.6g} ohm")
    add_load_reactance(b)


def size_class_b_tuned(b: Builder, ropt: float) -> None:
    """Tuned-load class B: choke, DC block, parallel f0 tank (loaded Q vs Ropt), L-section.

    The tank sits just after the DC block (reactance Ropt/60 at f0, so it is at the drain
    for RF) because its inductor to ground would otherwise short the supply.

    Tuned class B needs a current-source device (half-sine current, sine voltage; Cripps):
    an idealised switch would short the charged tank capacitor at every turn-on (100 A spikes
    in the example, a hard-switched circuit, not class B), so ``device.model = "switch"`` is
    refused. (A single switch and a shunt tank have no waveform pair that avoids this: the
    tank forces a sine voltage, the switch forces zero voltage for the on-time.)

    Raises
    ------
    SizingError
        For ``device.model = "switch"``.
    """
    d = b.design
    if d.device.model == "switch":
        raise SizingError(
            "design.topology: class_b_tuned with device.model = 'switch' makes the switch short the "
            "charged tank capacitor every cycle, which is not class B; set device.model = \"gm\" for tuned class B "
            "(or use class_e or a class-F topology for a switch)."
        )
    b.feed(ropt)
    b.block(ropt)
    y = absorb_parasitics(b, "B", ropt)
    if y is None:
        b.parallel_tank("tank", ropt, d.network.loaded_q, "Ropt")
        l_section(b, ropt, 0.0, d.load_ohm, f"Ropt = {ropt:.6g} ohm")
    else:
        # every harmonic is shorted, so Cout only helps there; at f0 the tank absorbs it
        y = past_block(b, y)
        rt = 1.0 / y.real
        b.tuned_tank("tank", rt, d.network.loaded_q, "the f0 target", y.imag,
                     f"the device capacitance ({_SRC_INTRINSIC})")
        l_section(b, rt, 0.0, d.load_ohm, f"R = 1/G = {rt:.6g} ohm (the f0 target's conductance)")
    add_load_reactance(b)


