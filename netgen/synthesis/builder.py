"""The component builder and the sizing formulas the topologies share.

Ropt from the power (with the device's own drop), the L-section match (Pozar), the quarter-wave
transformer, loaded-Q tanks and resonators, the feed choke and DC block, the lumped class-F
resonator impedance, and the conduction-angle Fourier coefficients (Cripps). Every component
carries the formula it came from in its ``how`` text.

Component names follow ``<base>_<suffix>`` with suffix ``l`` (H), ``c`` (F), ``z0`` / ``td``
(line impedance / delay); the netlist element is ``<KIND>_<base>`` (``tank_l`` -> ``L_tank``,
``line_z0`` + ``line_td`` -> ``T_line``); see docs/netlist_conventions.md.
"""

from __future__ import annotations

import math

from netgen.design import Component, Design
from netgen.errors import SizingError

__all__ = ["Builder", "digits12", "element_name", "ropt_from_power", "l_section", "match_orientation", "UNSIZED", "add_series", "add_shunt", "add_load_reactance",
           "even_reactance_factor", "lumped_resonator_z", "resonator_z", "conduction_fourier", "CLASS_COEFF",
           "CLASS_SOURCE", "E_SHUNT_K", "E_EXCESS_K", "FEED_X_RATIO", "E_FEED_X_RATIO", "RESONATOR_Q_TOL", "PI",
           "C0_M_S"]


def digits12(x: float) -> float:
    """``x`` to 12 significant digits: a sized value computed with numpy's vectorised functions
    (cos, tanh) or solvers can differ in its last bits between a CPU's SIMD paths (AVX2 and AVX-512
    machines gave different sized-design digests); 12 digits are the same everywhere."""
    return float(f"{x:.12g}")

PI = math.pi
C0_M_S = 299_792_458.0  # speed of light in vacuum (SI definition)

#: P = a * Vdd_eff^2 / R for each waveform class (see module docstring for sources)
CLASS_COEFF = {"F": 8.0 / PI**2, "invF": PI**2 / 8.0, "B": 0.5, "E": 0.5768}
CLASS_SOURCE = {
    "F": "8 Vdd_eff^2/(pi^2 Pout) (Raab 1997; Cripps)",
    "invF": "pi^2 Vdd_eff^2/(8 Pout) (inverse class F, dual of Raab 1997)",
    "B": "Vdd_eff^2/(2 Pout) (tuned class B; Cripps)",
    "E": "0.5768 Vdd_eff^2/Pout (Sokal & Sokal 1975; Raab 1977)",
}
#: Class-E constants (Sokal & Sokal, IEEE JSSC 1975; Raab, IEEE Trans. CAS 1977)
E_SHUNT_K = 0.1836
E_EXCESS_K = 1.1525
#: feed reactance = FEED_X_RATIO * Ropt, block reactance = Ropt / FEED_X_RATIO
#: (a measured choice: settles fast without detuning; docs/simulator_notes.md, "Bias network")
FEED_X_RATIO = 60.0
#: class E: the feed choke's reactance in units of R (Sokal's equations assume an RF choke)
E_FEED_X_RATIO = 300.0
_SUFFIX_KIND = {"l": "L", "c": "C", "z0": "T", "td": "T"}


def element_name(component: str) -> str:
    """Netlist element name of a component: ``tank_l`` -> ``L_tank``, ``line_z0`` -> ``T_line``."""
    base, _, suffix = component.rpartition("_")
    return f"{_SUFFIX_KIND[suffix]}_{base}"


# ---------------------------------------------------------------- helpers

class Builder:
    """Collects components in circuit order."""

    def __init__(self, design: Design):
        self.design = design
        self.w0 = 2 * PI * design.f0_hz
        self.items: list[Component] = []

    def add(self, name: str, kind: str, value: float, how: str, role: str, lossy: bool = True) -> None:
        if not (value > 0 and math.isfinite(value)):
            raise SizingError(
                f"component {name}: sized to {value!r}, which is not a positive finite value; "
                f"check the design values (set it in [network.values] to override)."
            )
        self.items.append(Component(name, kind, float(value), how, role, lossy))

    def add_unsized(self, name: str, kind: str, how: str, role: str) -> None:
        """A component the formulas cannot value (:data:`UNSIZED`); [network.values] must give it."""
        self.items.append(Component(name, kind, UNSIZED, how, role, True))

    def inductor_x(self, name: str, x_ohm: float, how: str, role: str, lossy: bool = True) -> None:
        """An inductor of reactance ``x_ohm`` at f0: L = X / omega0."""
        self.add(name, "L", x_ohm / self.w0, f"X = {how} at f0; L = X/omega0", role, lossy)

    def capacitor_x(self, name: str, x_ohm: float, how: str, role: str, lossy: bool = True) -> None:
        """A capacitor of reactance magnitude ``x_ohm`` at f0: C = 1 / (omega0 X)."""
        self.add(name, "C", 1.0 / (self.w0 * x_ohm), f"|X| = {how} at f0; C = 1/(omega0 |X|)", role, lossy)

    def parallel_tank(self, base: str, r_ohm: float, q: float, what: str, role: str = "tank") -> None:
        """Parallel LC at f0 with loaded Q relative to ``r_ohm``: C = Q/(omega0 R), L = 1/(omega0^2 C)."""
        c = q / (self.w0 * r_ohm)
        src = f"parallel tank at f0, loaded Q={q:g} across {what}"
        self.add(f"{base}_l", "L", 1.0 / (self.w0**2 * c), f"{src}: L = 1/(omega0^2 C)", role)
        self.add(f"{base}_c", "C", c, f"{src}: C = Q/(omega0 R), R = {r_ohm:.6g} ohm", role)

    def tuned_tank(self, base: str, r_ohm: float, q: float, what: str, b_s: float, why: str,
                   role: str = "tank") -> None:
        """Parallel tank of loaded Q relative to ``r_ohm`` presenting the susceptance ``b_s`` at f0.

        ``L = R/(omega0 Q)`` as for the resonant tank; ``C = Q/(omega0 R) + B/omega0``, so that
        ``omega0 C - 1/(omega0 L) = B`` (re-tuning the tank capacitance for a shunt susceptance,
        e.g. absorbing the device output capacitance; Cripps, recalled from memory).

        Raises
        ------
        SizingError
            When the capacitance would not be positive (the device capacitance alone exceeds
            the tank's loaded Q).
        """
        c = (q / r_ohm + b_s) / self.w0
        if c <= 0:
            c_dev = -b_s / self.w0
            f_max = q / (2 * PI * r_ohm * c_dev)
            raise SizingError(
                f"device.cout: {c_dev:.4g} F of device capacitance at f0 is more than the f0 tank holds "
                f"(omega0 C R = {-b_s * r_ohm:.3g} > network.loaded_q = {q:g}; the limit is f0 <= Q/(2 pi R C) = "
                f"{f_max:.4g} Hz); raise network.loaded_q above {-b_s * r_ohm:.3g}, lower design.f0 or use a smaller device."
            )
        src = f"parallel tank at f0, loaded Q={q:g} across {what}, re-tuned for {why}"
        self.add(f"{base}_l", "L", r_ohm / (self.w0 * q), f"{src}: L = R/(omega0 Q), R = {r_ohm:.6g} ohm", role)
        self.add(f"{base}_c", "C", c, f"{src}: C = Q/(omega0 R) + B/omega0, B = {b_s:.6g} S (Cripps, recalled from memory)", role)

    def series_resonator(self, base: str, r_ohm: float, q: float, what: str, role: str = "resonator") -> None:
        """Series LC at f0 with loaded Q relative to ``r_ohm``: L = Q R/omega0, C = 1/(omega0^2 L)."""
        lval = q * r_ohm / self.w0
        src = f"series resonator at f0, loaded Q={q:g} with {what}"
        self.add(f"{base}_l", "L", lval, f"{src}: L = Q R/omega0, R = {r_ohm:.6g} ohm", role)
        self.add(f"{base}_c", "C", 1.0 / (self.w0**2 * lval), f"{src}: C = 1/(omega0^2 L)", role)

    def quarter_wave(self, base: str, z0_ohm: float, how_z0: str, role: str = "line") -> None:
        """Quarter-wave line at f0: TD = 1/(4 f0) (Pozar, the quarter-wave transformer)."""
        self.add(f"{base}_z0", "Z0", z0_ohm, how_z0, role)
        self.add(f"{base}_td", "TD", 1.0 / (4.0 * self.design.f0_hz), "quarter wave at f0: TD = 1/(4 f0) (Pozar)", role)

    def feed(self, r_ohm: float, name: str = "feed_l", ratio: float = FEED_X_RATIO) -> None:
        """DC-feed choke: reactance ``ratio`` x R at f0 (default 60, measured: docs/simulator_notes.md), or network.feed_l."""
        net = self.design.network
        if net.feed_l_h is not None:
            self.add(name, "L", net.feed_l_h, "set by network.feed_l", "feed", lossy=False)
        else:
            why = "measured ratio, docs/simulator_notes.md" if ratio == FEED_X_RATIO else "class E, docs/topologies.md"
            self.inductor_x(name, ratio * r_ohm, f"{ratio:g} x {r_ohm:.6g} ohm (RF choke; {why})", "feed", lossy=False)

    def block(self, r_ohm: float, name: str = "block_c") -> None:
        """DC block (or RF bypass): reactance R/60 at f0, or network.block_c."""
        net = self.design.network
        if net.block_c_f is not None:
            self.add(name, "C", net.block_c_f, "set by network.block_c", "block")
        else:
            self.capacitor_x(name, r_ohm / FEED_X_RATIO, f"{r_ohm:.6g} ohm / {FEED_X_RATIO:g} (RF short; measured ratio, docs/simulator_notes.md)", "block")


def ropt_from_power(design: Design, cls: str) -> tuple[float, float, str]:
    """Optimum drain resistance, effective supply and how it was obtained.

    Parameters
    ----------
    design : Design
    cls : str
        ``F``, ``invF``, ``B`` or ``E`` (key of :data:`CLASS_COEFF`).

    Returns
    -------
    (ropt_ohm, vdd_eff_v, how)

    Notes
    -----
    ``R = a Vdd_eff^2 / Pout``; see the module docstring for ``a`` and ``Vdd_eff``.
    """
    a = CLASS_COEFF[cls]
    dev = design.device
    vdd = design.vdd_v
    if dev.model == "switch":
        k = dev.ron_ohm / dev.duty
        if design.ropt_ohm is not None:
            r = design.ropt_ohm
            veff = vdd / (1.0 + a * k / r)
            return r, veff, "set by design.ropt"
        disc = vdd**2 - 4.0 * k * design.pout_w
        if disc <= 0:
            raise SizingError(
                f"device.ron: {dev.ron_ohm:g} ohm drops more than the supply can give at design.pout = "
                f"{design.pout_w:g} W; lower device.ron or design.pout, or raise design.vdd."
            )
        veff = 0.5 * (vdd + math.sqrt(disc))
    elif dev.model in ("gm", "angelov"):
        knee = dev.vknee_v if dev.model == "gm" else angelov_knee_v(dev)
        veff = vdd - knee
        if veff <= 0 and dev.model == "angelov":
            raise SizingError(f"device.alpha: the knee of the angelov device ({knee:.3g} V) is not below design.vdd = {vdd:g} V; raise alpha or vdd.")
        if veff <= 0:
            raise SizingError(f"device.vknee: {dev.vknee_v:g} V is not below design.vdd = {vdd:g} V; lower the knee voltage.")
        if design.ropt_ohm is not None:
            return design.ropt_ohm, veff, "set by design.ropt"
    else:
        veff = vdd
        if design.ropt_ohm is not None:
            return design.ropt_ohm, veff, "set by design.ropt"
    return a * veff**2 / design.pout_w, veff, CLASS_SOURCE[cls]


def angelov_knee_v(dev) -> float:
    """Knee voltage of the angelov device in V: 2/alpha (tanh(alpha Vds) reaches 0.96 there) plus the
    access-resistance drop 2 Ipk (Rd + Rs) at the peak current (our estimate; docs/devices.md)."""
    return 2.0 / dev.alpha_per_v + 2.0 * dev.ipk_a * (dev.rd_ohm + dev.rs_ohm)


#: a value the formulas cannot give for a fixed L-section orientation (network.match_shunt);
#: it must come from [network.values] (netgen.synthesis.sizing checks)
UNSIZED = math.nan


def match_orientation(components) -> str:
    """Where the shunt element of a sized L-section sits: ``input``, ``load`` or ``none``
    (components in circuit order, as ``SizedDesign.components``)."""
    names = [n for n in components if n.startswith(("match_series", "match_shunt"))]
    shunt = [i for i, n in enumerate(names) if n.startswith("match_shunt")]
    if not shunt:
        return "none"
    return "input" if shunt[0] == 0 else "load"


def l_section(b: Builder, r_target: float, x_target: float, r_load: float, how_target: str,
              force: bool = False) -> None:
    """L-section from the load ``r_load`` to ``r_target + j x_target`` at the input (f0).

    Lowpass (series L, shunt C) or highpass (series C, shunt L) per ``network.match``;
    the shunt element sits at the higher-resistance side, Q = sqrt(Rhigh/Rlow - 1)
    (Pozar, "Microwave Engineering", L-section matching networks). A non-zero ``x_target``
    (used by class_f_lumped to absorb the resonators' reactance) is folded into the
    series element (shunt at the load) or the shunt element (shunt at the input).
    Nothing is added when the resistances agree within 1 % and ``x_target`` is zero.
    Components are added input side first (circuit order).

    ``network.match_shunt`` other than ``auto`` fixes the orientation (a sized design keeps its
    circuit whatever Ropt and RL of a sweep point); where the formulas cannot reach the target
    with it the value is :data:`UNSIZED` and must be given in ``[network.values]``.
    """
    low = b.design.network.match == "lowpass"
    sign = 1.0 if low else -1.0
    src = f"L-section {'lowpass' if low else 'highpass'} {how_target} -> RL = {r_load:.6g} ohm (Pozar, L-section matching)"
    where = b.design.network.match_shunt
    if where == "auto":
        if abs(r_target - r_load) <= 0.01 * r_load:
            where = "none" if (force or x_target != 0.0) else ""
        else:
            where = "load" if r_target < r_load else "input"
    if not where:
        return
    if where == "none":
        # resistances agree: only a series element cancelling the reactance
        if x_target != 0.0:
            add_series(b, "match_series", x_target, src + ", series only (R already matched)")
        return
    if where == "load":
        # series at the input, shunt across the load
        g = 1.0 / r_load
        q = math.sqrt(r_load / r_target - 1.0) if r_target < r_load else UNSIZED
        bsh = sign * q / r_load  # Re{1/(G + jB)} = r_target  <=>  B = +-sqrt(G/Rt - G^2)
        im_z = -bsh / (g**2 + bsh**2)
        xs = x_target - im_z
        add_series(b, "match_series", xs, src + f", Q = {q:.4g}")
        add_shunt(b, "match_shunt", bsh, src + f", Q = {q:.4g}", kind="C" if low else "L")
    else:
        yt = 1.0 / complex(r_target, x_target)
        gt, bt = yt.real, yt.imag
        if 1.0 / gt < r_load:
            if b.design.network.match_shunt == "auto":
                raise SizingError(f"network.match: cannot reach {how_target} from RL = {r_load:g} ohm with an L-section; set the match values in [network.values].")
            q = UNSIZED
        else:
            q = math.sqrt(1.0 / (gt * r_load) - 1.0)
        xs = sign * q * r_load
        y1 = 1.0 / complex(r_load, xs) if math.isfinite(xs) else complex(UNSIZED, UNSIZED)
        bsh = bt - y1.imag
        add_shunt(b, "match_shunt", bsh, src + f", Q = {q:.4g}")
        add_series(b, "match_series", xs, src + f", Q = {q:.4g}", kind="L" if low else "C")


def add_series(b: Builder, base: str, x_ohm: float, how: str, role: str = "match",
               kind: str | None = None) -> None:
    """A series L (X > 0) or C (X < 0) of reactance ``x_ohm`` at f0; ``kind`` fixes the element where
    X may be unknown (NaN: :data:`UNSIZED`) or of either sign."""
    if not math.isfinite(x_ohm) or (kind is not None and (x_ohm > 0) != (kind == "L")):
        b.add_unsized(f"{base}_{kind.lower() if kind else 'l'}", kind or "L", f"{how}: not reachable with this orientation; give it in [network.values]", role)
    elif x_ohm > 0:
        b.add(f"{base}_l", "L", x_ohm / b.w0, f"{how}: series X = {x_ohm:.6g} ohm, L = X/omega0", role)
    else:
        b.add(f"{base}_c", "C", 1.0 / (b.w0 * -x_ohm), f"{how}: series X = {x_ohm:.6g} ohm, C = -1/(omega0 X)", role)


def add_shunt(b: Builder, base: str, b_s: float, how: str, role: str = "match",
              kind: str | None = None) -> None:
    """A shunt C (B > 0) or L (B < 0) of susceptance ``b_s`` at f0 (``kind`` as in :func:`add_series`)."""
    if not math.isfinite(b_s) or b_s == 0.0 or (kind is not None and (b_s > 0) != (kind == "C")):
        b.add_unsized(f"{base}_{kind.lower() if kind else 'c'}", kind or "C", f"{how}: not reachable with this orientation; give it in [network.values]", role)
    elif b_s > 0:
        b.add(f"{base}_c", "C", b_s / b.w0, f"{how}: shunt B = {b_s:.6g} S, C = B/omega0", role)
    else:
        b.add(f"{base}_l", "L", 1.0 / (b.w0 * -b_s), f"{how}: shunt B = {b_s:.6g} S, L = -1/(omega0 B)", role)


def add_load_reactance(b: Builder) -> None:
    """Series L (X > 0) or C (X < 0) of reactance design.load_x at f0, just before RLOAD."""
    x = b.design.load_x_ohm
    if abs(x) <= 1e-9 * b.design.load_ohm:  # rounding noise of a computed load (e.g. on a VSWR circle)
        return
    if x > 0:
        b.inductor_x("loadx_l", x, f"design.load_x = {x:.6g} ohm", "load")
    elif x < 0:
        b.capacitor_x("loadx_c", -x, f"-design.load_x = {-x:.6g} ohm", "load")


#: Effective Q ceiling of a harmonic resonator from component tolerance: a resonator detuned by
#: delta = 1 % presents |Z| ~ Zr/(2 delta) = 50 Zr at the harmonic (parallel-resonance expansion
#: Z ~ Zr/(j 2 delta)); common practice, capacitor tolerance of about 1 %.
RESONATOR_Q_TOL = 50.0


def even_reactance_factor(n_res: int, m: int) -> float:
    """Series reactance at m f0 of the resonators 3f0..(2N+1)f0, in units of Zr.

    A parallel LC at n f0 with characteristic impedance Zr (L = Zr/omega_n, C = 1/(Zr omega_n))
    has ``Z = j Zr x/(1 - x^2)``, ``x = m/n`` (circuit theory: Y = j (x - 1/x)/Zr). Returns
    ``S_m = sum_n x/(1 - x^2)`` (positive: inductive). S_2 = 1.2 (N=1), 1.676 (N=2), 1.987 (N=3).
    """
    total = 0.0
    for k in range(1, n_res + 1):
        x = m / (2 * k + 1)
        total += x / (1.0 - x * x)
    return total


def lumped_resonator_z(design: Design, ropt: float) -> tuple[float, float, str]:
    """Default characteristic impedance Zr of the class_f_lumped resonators, ohm.

    Returns
    -------
    (zr_ohm, margin, how)
        ``margin`` M: the even harmonics see about Ropt/M, the odd ones about M Ropt (below).

    Notes
    -----
    Both harmonic sets scale with Zr, in opposite directions:

    * even harmonics m = 2, 4, .. 2N (below the top resonator): the resonators are inductive,
      ``X_m = Zr S_m`` (:func:`even_reactance_factor`); the shunt f0 tank adds
      ``-Ropt/(Q_L (m - 1/m))`` on the load side, which only helps, so it is left out;
    * odd harmonics n = 3 .. 2N+1: resonator n is an open of ``R_n = Q_r Zr``, with the
      resonator's effective Q from the inductor (its Q at 3 f0, the worst n, by
      network.inductor_loss_law: Q_u for constant Q, sqrt(3) Q_u for skin effect, 3 Q_u for a
      fixed R), the capacitor ESR at 3 f0 (Q = Zr/ESR) and the tolerance ceiling
      :data:`RESONATOR_Q_TOL`: ``1/Q_r = 1/Q_u(3 f0) + ESR(3 f0)/Zr + 1/50``.

    Their product ``X_even R_odd = Zr^2 S Q_r`` does not depend on how Ropt is split, so the
    balanced choice makes the short and the open equally far from Ropt (geometric mean):
    ``Zr^2 S_max Q_r(Zr) = Ropt^2`` (solved by bisection; the left side grows with Zr), giving
    ``X_even ~ Ropt/M`` and ``R_odd ~ M Ropt`` with ``M = sqrt(Q_r/S_max)``. For N = 2, lossless
    parts: M = 5.5, Zr = 0.11 Ropt. Class F needs M well above 1; M >= 4 meets the
    Ropt/4 short and 4 Ropt open targets. Our own design rule (not a published formula).
    """
    net = design.network
    n_res = int(net.harmonics)
    s_max = max(abs(even_reactance_factor(n_res, m)) for m in range(2, 2 * n_res + 1, 2))
    # the inductor's Q at 3 f0 by network.inductor_loss_law (netgen.synthesis.losses): 3 Q_u for a
    # fixed R, sqrt(3) Q_u for skin effect, Q_u for constant Q; the ESR at 3 f0 likewise
    q3 = {"fixed": 3.0, "skin": math.sqrt(3.0)}.get(net.inductor_loss_law, 1.0)
    inv_qu = 0.0 if math.isinf(net.inductor_q) else 1.0 / (q3 * net.inductor_q)
    esr = net.capacitor_esr_ohm / (3.0 if net.capacitor_loss_law == "constant_q" else 1.0)

    def q_r(zr: float) -> float:
        return 1.0 / (inv_qu + esr / zr + 1.0 / RESONATOR_Q_TOL)

    lo, hi = 1e-9 * ropt, 1e3 * ropt
    for _ in range(200):  # bisection in log space on Zr^2 S Q_r(Zr) - Ropt^2 (increasing)
        mid = math.sqrt(lo * hi)
        if mid * mid * s_max * q_r(mid) > ropt * ropt:
            hi = mid
        else:
            lo = mid
        if hi / lo < 1 + 1e-12:
            break
    zr = math.sqrt(lo * hi)
    margin = math.sqrt(q_r(zr) / s_max)
    how = (f"Zr^2 S Q_r = Ropt^2 (even short ~ Ropt/M, odd open ~ M Ropt, M = sqrt(Q_r/S) = {margin:.3g}); "
           f"S = {s_max:.4g} resonator reactance at the worst even harmonic per ohm of Zr, "
           f"1/Q_r = 1/Q_u(3 f0) + ESR(3 f0)/Zr + 1/{RESONATOR_Q_TOL:g} (our design rule)")
    return zr, margin, how


def resonator_z(design: Design, ropt: float) -> tuple[float, str]:
    if design.network.resonator_z_ohm is not None:
        return design.network.resonator_z_ohm, "set by network.resonator_z"
    zr, _margin, how = lumped_resonator_z(design, ropt)
    return zr, how



def conduction_fourier(angle_deg: float) -> tuple[float, float]:
    """(Idc/Imax, I1/Imax) of a reduced-conduction-angle current pulse (Cripps, ch. 3).

    With half angle alpha: Idc/Imax = (sin a - a cos a)/(pi (1 - cos a)),
    I1/Imax = (a - sin a cos a)/(pi (1 - cos a)); class B (a = pi/2): 1/pi and 1/2.
    """
    a = math.radians(angle_deg) / 2.0
    den = PI * (1.0 - math.cos(a))
    return (math.sin(a) - a * math.cos(a)) / den, (a - math.sin(a) * math.cos(a)) / den


