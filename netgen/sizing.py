"""Sizing: published formulas turning a :class:`~netgen.design.Design` into component values.

One function per topology (``size_class_f_line`` ...); :func:`size` picks it through
:mod:`netgen.topologies`, applies the load reactance, the ``[network.values]`` overrides and
computes the derived numbers (line length, bias resonance, expected DC current).

Component names follow ``<base>_<suffix>`` with suffix ``l`` (H), ``c`` (F), ``z0`` / ``td``
(line impedance / delay); the netlist element is ``<KIND>_<base>`` (``tank_l`` -> ``L_tank``,
``line_z0`` + ``line_td`` -> ``T_line``); see docs/netlist_conventions.md.

Effective supply (how the device's own drop is accounted for)
------------------------------------------------------------
* Idealised switch: while the switch conducts, the drain sits at Ron times the switch current,
  on average ``Ron * Idc / duty`` (the whole DC current flows in the on-time). That average is
  taken off the supply: ``Vdd_eff = Vdd - Ron * Idc / duty``. With ``P = a Vdd_eff^2 / R``
  (``a`` of the class, below) and ``Idc = P / Vdd_eff``:
  given ``pout``: ``Vdd_eff = (Vdd + sqrt(Vdd^2 - 4 (Ron/duty) P)) / 2``;
  given ``ropt``: ``Vdd_eff = Vdd / (1 + a Ron / (duty R))``.
  This is our own first-order estimate, not a published formula.
* Transconductance device: ``Vdd_eff = Vdd - Vknee`` (common practice; Cripps, "RF Power
  Amplifiers for Wireless Communications", the knee eats that much of the swing).
* User SPICE device: ``Vdd_eff = Vdd`` (nothing is known about it).

Class coefficients ``a`` in ``P = a Vdd_eff^2 / R``: class F ``8/pi^2`` (Raab 1997, Cripps);
inverse F ``pi^2/8``; tuned class B ``1/2``; class E ``0.5768`` (Sokal & Sokal 1975; Raab 1977).

Expected DC current (the warm start's ``idc_est_a``)
----------------------------------------------------
gm device: ``Imax`` times the DC Fourier coefficient of its conduction angle (Cripps). Switch and
user devices: :func:`switch_dc_estimate`, the class formula scaled by the f0 admittance the sized
(lossy) network really presents, divided by the efficiency bound of the harmonics it controls
(:func:`netgen.theory.bound_for`), plus the hard-switching loss of the drain's high-frequency
capacitance (class_f_lumped only). Within 10 % of the settled simulation for every example.

class_f_lumped resonator impedance: :func:`lumped_resonator_z` (docs/template_context.md).
"""

from __future__ import annotations

import difflib
import math
from pathlib import Path

from .design import Design
from .errors import DesignError, SizingError
from .quantities import format_quantity, parse_quantity
from .records import Component, SizedDesign

__all__ = [
    "size",
    "write_sized_toml",
    "sized_toml_text",
    "CLASS_COEFF",
    "FEED_X_RATIO",
    "E_FEED_X_RATIO",
    "ropt_from_power",
    "lumped_resonator_z",
    "even_reactance_factor",
    "RESONATOR_Q_TOL",
    "l_section",
    "switch_dc_estimate",
    "drain_hf_capacitance",
    "element_name",
    "size_class_f_line",
    "size_class_f_feed",
    "size_class_f_lumped",
    "size_inverse_f_line",
    "size_class_e",
    "size_class_b_tuned",
]

PI = math.pi
C0_M_S = 299_792_458.0  # speed of light in vacuum (SI definition)

#: P = a * Vdd_eff^2 / R for each waveform class (see module docstring for sources)
CLASS_COEFF = {"F": 8.0 / PI**2, "invF": PI**2 / 8.0, "B": 0.5, "E": 0.5768}
_CLASS_SOURCE = {
    "F": "8 Vdd_eff^2/(pi^2 Pout) (Raab 1997; Cripps)",
    "invF": "pi^2 Vdd_eff^2/(8 Pout) (inverse class F, dual of Raab 1997)",
    "B": "Vdd_eff^2/(2 Pout) (tuned class B; Cripps)",
    "E": "0.5768 Vdd_eff^2/Pout (Sokal & Sokal 1975; Raab 1977)",
}
#: Class-E constants (Sokal & Sokal, IEEE JSSC 1975; Raab, IEEE Trans. CAS 1977)
E_SHUNT_K = 0.1836
E_EXCESS_K = 1.1525
#: feed reactance = FEED_X_RATIO * Ropt, block reactance = Ropt / FEED_X_RATIO (NGSPICE_NOTES)
FEED_X_RATIO = 60.0
#: class E: the feed choke's reactance in units of R (Sokal's equations assume an RF choke)
E_FEED_X_RATIO = 300.0
_SUFFIX_KIND = {"l": "L", "c": "C", "z0": "T", "td": "T"}


def element_name(component: str) -> str:
    """Netlist element name of a component: ``tank_l`` -> ``L_tank``, ``line_z0`` -> ``T_line``."""
    base, _, suffix = component.rpartition("_")
    return f"{_SUFFIX_KIND[suffix]}_{base}"


# ---------------------------------------------------------------- helpers

class _Builder:
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
        """DC-feed choke: reactance ``ratio`` x R at f0 (default 60, NGSPICE_NOTES), or network.feed_l."""
        net = self.design.network
        if net.feed_l_h is not None:
            self.add(name, "L", net.feed_l_h, "set by network.feed_l", "feed", lossy=False)
        else:
            self.inductor_x(name, ratio * r_ohm, f"{ratio:g} x {r_ohm:.6g} ohm (common practice: RF choke)", "feed", lossy=False)

    def block(self, r_ohm: float, name: str = "block_c") -> None:
        """DC block (or RF bypass): reactance R/60 at f0, or network.block_c."""
        net = self.design.network
        if net.block_c_f is not None:
            self.add(name, "C", net.block_c_f, "set by network.block_c", "block")
        else:
            self.capacitor_x(name, r_ohm / FEED_X_RATIO, f"{r_ohm:.6g} ohm / {FEED_X_RATIO:g} (common practice: RF short)", "block")


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
    elif dev.model == "gm":
        veff = vdd - dev.vknee_v
        if veff <= 0:
            raise SizingError(f"device.vknee: {dev.vknee_v:g} V is not below design.vdd = {vdd:g} V; lower the knee voltage.")
        if design.ropt_ohm is not None:
            return design.ropt_ohm, veff, "set by design.ropt"
    else:
        veff = vdd
        if design.ropt_ohm is not None:
            return design.ropt_ohm, veff, "set by design.ropt"
    return a * veff**2 / design.pout_w, veff, _CLASS_SOURCE[cls]


def l_section(b: _Builder, r_target: float, x_target: float, r_load: float, how_target: str,
              force: bool = False) -> None:
    """L-section from the load ``r_load`` to ``r_target + j x_target`` at the input (f0).

    Lowpass (series L, shunt C) or highpass (series C, shunt L) per ``network.match``;
    the shunt element sits at the higher-resistance side, Q = sqrt(Rhigh/Rlow - 1)
    (Pozar, "Microwave Engineering", L-section matching networks). A non-zero ``x_target``
    (used by class_f_lumped to absorb the resonators' reactance) is folded into the
    series element (shunt at the load) or the shunt element (shunt at the input).
    Nothing is added when the resistances agree within 1 % and ``x_target`` is zero.
    Components are added input side first (circuit order).
    """
    low = b.design.network.match == "lowpass"
    sign = 1.0 if low else -1.0
    src = f"L-section {'lowpass' if low else 'highpass'} {how_target} -> RL = {r_load:.6g} ohm (Pozar, L-section matching)"
    if abs(r_target - r_load) <= 0.01 * r_load and not force:
        if x_target == 0.0:
            return
    if abs(r_target - r_load) <= 0.01 * r_load:
        # resistances agree: only a series element cancelling the reactance
        xs = x_target
        if abs(xs) > 0:
            _series(b, "match_series", xs, src + ", series only (R already matched)")
        return
    if r_target < r_load:
        # series at the input, shunt across the load
        g = 1.0 / r_load
        q = math.sqrt(r_load / r_target - 1.0)
        bsh = sign * q / r_load  # Re{1/(G + jB)} = r_target  <=>  B = +-sqrt(G/Rt - G^2)
        im_z = -bsh / (g**2 + bsh**2)
        xs = x_target - im_z
        _series(b, "match_series", xs, src + f", Q = {q:.4g}")
        _shunt(b, "match_shunt", bsh, src + f", Q = {q:.4g}")
    else:
        yt = 1.0 / complex(r_target, x_target)
        gt, bt = yt.real, yt.imag
        if 1.0 / gt < r_load:
            raise SizingError(f"network.match: cannot reach {how_target} from RL = {r_load:g} ohm with an L-section; set the match values in [network.values].")
        q = math.sqrt(1.0 / (gt * r_load) - 1.0)
        xs = sign * q * r_load
        y1 = 1.0 / complex(r_load, xs)
        bsh = bt - y1.imag
        _shunt(b, "match_shunt", bsh, src + f", Q = {q:.4g}")
        _series(b, "match_series", xs, src + f", Q = {q:.4g}")


def _series(b: _Builder, base: str, x_ohm: float, how: str, role: str = "match") -> None:
    if x_ohm > 0:
        b.add(f"{base}_l", "L", x_ohm / b.w0, f"{how}: series X = {x_ohm:.6g} ohm, L = X/omega0", role)
    else:
        b.add(f"{base}_c", "C", 1.0 / (b.w0 * -x_ohm), f"{how}: series X = {x_ohm:.6g} ohm, C = -1/(omega0 X)", role)


def _shunt(b: _Builder, base: str, b_s: float, how: str, role: str = "match") -> None:
    if b_s > 0:
        b.add(f"{base}_c", "C", b_s / b.w0, f"{how}: shunt B = {b_s:.6g} S, C = B/omega0", role)
    else:
        b.add(f"{base}_l", "L", 1.0 / (b.w0 * -b_s), f"{how}: shunt B = {b_s:.6g} S, L = -1/(omega0 B)", role)


def _load_x(b: _Builder) -> None:
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
      resonator's effective Q from the inductor (series R = omega0 L/Q_u, so Q = n Q_u at n f0;
      the worst is n = 3), the capacitor ESR (Q = Zr/ESR at any n) and the tolerance ceiling
      :data:`RESONATOR_Q_TOL`: ``1/Q_r = 1/(3 Q_u) + ESR/Zr + 1/50``.

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
    inv_qu = 0.0 if math.isinf(net.inductor_q) else 1.0 / (3.0 * net.inductor_q)
    esr = net.capacitor_esr_ohm

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
           f"1/Q_r = 1/(3 Q_u) + ESR/Zr + 1/{RESONATOR_Q_TOL:g} (our design rule)")
    return zr, margin, how


def _resonator_z(design: Design, ropt: float) -> tuple[float, str]:
    if design.network.resonator_z_ohm is not None:
        return design.network.resonator_z_ohm, "set by network.resonator_z"
    zr, _margin, how = lumped_resonator_z(design, ropt)
    return zr, how


# ---------------------------------------------------------------- topologies

def _feed_block_transformer(b: _Builder, ropt: float) -> None:
    """Choke at the drain, DC block, and a quarter-wave line Z0 = sqrt(Ropt RL) that presents
    Ropt at f0 for the load RL (Pozar, the quarter-wave transformer)."""
    b.feed(ropt)
    b.block(ropt)
    rl = b.design.load_ohm
    b.quarter_wave("line", math.sqrt(ropt * rl),
                   f"Z0 = sqrt(Ropt RL) = sqrt({ropt:.6g} x {rl:.6g}) (Pozar, quarter-wave transformer)")


def size_class_f_line(b: _Builder, ropt: float) -> None:
    """Class F with a quarter-wave series line and a parallel f0 tank at the load.

    Choke at the drain, DC block, line Z0 = sqrt(Ropt RL), TD = 1/(4 f0), tank across RL
    (loaded Q relative to RL): odd harmonics see an open and even harmonics a short at the
    drain (Pozar, the quarter-wave transformer; Raab 1997).
    """
    d = b.design
    _feed_block_transformer(b, ropt)
    b.parallel_tank("tank", d.load_ohm, d.network.loaded_q, "RL")
    _load_x(b)


def size_class_f_feed(b: _Builder, ropt: float) -> None:
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
    b.block(ropt)
    b.series_resonator("res", ropt, d.network.loaded_q, "Ropt")
    l_section(b, ropt, 0.0, d.load_ohm, f"Ropt = {ropt:.6g} ohm")
    _load_x(b)


def size_class_f_lumped(b: _Builder, ropt: float) -> None:
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
    b.block(ropt)
    zr, how_zr = _resonator_z(d, ropt)
    x_tanks = 0.0
    for k in range(1, d.network.harmonics + 1):
        n = 2 * k + 1
        wn = n * b.w0
        src = f"parallel resonator at {n} f0, Zr = {zr:.6g} ohm ({how_zr})"
        b.add(f"res{n}_l", "L", zr / wn, f"{src}: L = Zr/omega_n", "resonator")
        b.add(f"res{n}_c", "C", 1.0 / (zr * wn), f"{src}: C = 1/(Zr omega_n)", "resonator")
        x_tanks += b.w0 * (zr / wn) / (1.0 - (1.0 / n) ** 2)
    b.parallel_tank("tank", ropt, d.network.loaded_q, "Ropt")
    l_section(b, ropt, -x_tanks, d.load_ohm, f"Ropt - j{x_tanks:.6g} ohm", force=True)
    _load_x(b)


def size_inverse_f_line(b: _Builder, ropt: float) -> None:
    """Inverse class F: choke, block, quarter-wave line Z0 = sqrt(Ropt RL), series f0 resonator + RL.

    The series resonator (loaded Q relative to RL) is a short at f0, so the drain sees
    Z0^2/RL = Ropt; at harmonics it is a high impedance, so the line end is nearly open:
    short at odd and open at even harmonics at the drain (Pozar, quarter-wave transformer).
    """
    d = b.design
    _feed_block_transformer(b, ropt)
    b.series_resonator("res", d.load_ohm, d.network.loaded_q, "RL")
    _load_x(b)


def size_class_e(b: _Builder, r_ohm: float) -> None:
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
    c_shunt = c_total - d.device.cout_f
    if c_shunt <= 0:
        raise SizingError(
            f"device.cout: {d.device.cout_f:.4g} F is not below the class-E shunt capacitance "
            f"0.1836/(omega0 R) = {c_total:.4g} F; lower design.pout, raise design.vdd or use a smaller device."
        )
    b.add("shunt_c", "C", c_shunt,
          f"class-E shunt C = 0.1836/(omega0 R) + 1/(omega0^2 L_feed) - Cout = {c_sokal:.6g} + "
          f"{c_total - c_sokal:.6g} - {d.device.cout_f:.6g} F (Sokal & Sokal 1975; choke compensation at f0)", "shunt")
    q = d.network.loaded_q
    l0 = q * r_ohm / b.w0
    b.add("series_c", "C", 1.0 / (b.w0**2 * l0), "series resonator C0 = 1/(omega0^2 L0) (also the DC block)", "block")
    b.add("series_l", "L", l0, f"series resonator L0 = Q R/omega0, loaded Q={q:g}, R = {r_ohm:.6g} ohm", "resonator")
    b.add("excess_l", "L", E_EXCESS_K * r_ohm / b.w0, "class-E excess reactance X = 1.1525 R at f0 (Sokal & Sokal 1975; Raab 1977)", "series")
    l_section(b, r_ohm, 0.0, d.load_ohm, f"R = {r_ohm:.6g} ohm")
    _load_x(b)


def size_class_b_tuned(b: _Builder, ropt: float) -> None:
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
    b.parallel_tank("tank", ropt, d.network.loaded_q, "Ropt")
    l_section(b, ropt, 0.0, d.load_ohm, f"Ropt = {ropt:.6g} ohm")
    _load_x(b)


# ---------------------------------------------------------------- entry point

def _conduction_fourier(angle_deg: float) -> tuple[float, float]:
    """(Idc/Imax, I1/Imax) of a reduced-conduction-angle current pulse (Cripps, ch. 3).

    With half angle alpha: Idc/Imax = (sin a - a cos a)/(pi (1 - cos a)),
    I1/Imax = (a - sin a cos a)/(pi (1 - cos a)); class B (a = pi/2): 1/pi and 1/2.
    """
    a = math.radians(angle_deg) / 2.0
    den = PI * (1.0 - math.cos(a))
    return (math.sin(a) - a * math.cos(a)) / den, (a - math.sin(a) * math.cos(a)) / den


def size(design: Design) -> SizedDesign:
    """Size every component of ``design`` for its topology.

    Parameters
    ----------
    design : Design

    Returns
    -------
    SizedDesign
        Components in circuit order (drain to load), ``ropt_ohm``, ``derived`` numbers
        (name -> (SI value, unit, how)), ``idc_est_a`` and ``pout_est_w``.

    Raises
    ------
    SizingError
        When the specification cannot be realised.
    DesignError
        For an unknown or invalid ``[network.values]`` override.
    """
    from .topologies import resolve_topology

    topo = resolve_topology(design)
    cls = topo.wave_class
    ropt, veff, how_r = ropt_from_power(design, cls)
    a = CLASS_COEFF[cls]
    pout = a * veff**2 / ropt
    b = _Builder(design)
    topo.sizer(b, ropt)
    comps = {c.name: c for c in b.items}
    comps = _apply_overrides(design, comps, topo.name)

    derived: dict[str, tuple] = {
        "ropt_ohm": (ropt, "ohm", how_r),
        "vdd_eff_v": (veff, "V", _veff_how(design)),
        "pout_est_w": (pout, "W", f"P = a Vdd_eff^2/R with a = {a:.6g} (class {cls})"),
    }
    dev = design.device
    if dev.model == "gm":
        fdc, f1 = _conduction_fourier(dev.conduction_angle_deg)
        v1 = math.sqrt(2.0 * pout * ropt)
        if dev.imax_a is not None:
            imax, how_i = dev.imax_a, "set by device.imax"
        else:
            imax = v1 / ropt / f1
            how_i = "Imax = V1/(Ropt I1/Imax), V1 = sqrt(2 P Ropt), I1/Imax from the conduction angle (Cripps)"
        derived["imax_a"] = (imax, "A", how_i)
        idc = imax * fdc
        derived["idc_est_a"] = (idc, "A", "Idc = Imax (sin a - a cos a)/(pi (1 - cos a)) (Cripps, reduced conduction angle)")
        pout_est = min(pout, 0.5 * (imax * f1) ** 2 * ropt)
    else:
        sized0 = SizedDesign(design=design, ropt_ohm=ropt, components=comps, derived=dict(derived))
        est = switch_dc_estimate(sized0, pout, veff)
        idc = est["idc_a"]
        derived["idc_est_a"] = (idc, "A", est["how"])
        derived["pfund_drain_est_w"] = (est["pfund_w"], "W", "P1 = a Vdd_eff^2 Re(Y1)/Re(Y1 lossless): the class formula with the sized network's f0 admittance")
        if est["pcap_w"] > 0:
            derived["hard_switching_est_w"] = (est["pcap_w"], "W", "1/2 C_hf (2 Vdd)^2 f0 (the network capacitance the drain sees at high harmonics) + the device Cout loss (cout_switching_loss): discharged by the switch each turn-on (estimate)")
        pout_est = pout
    if "line_td" in comps or "feedline_td" in comps:
        base = "line" if "line_td" in comps else "feedline"
        td = comps[f"{base}_td"].value
        derived[f"{base}_length_m"] = (C0_M_S * td / math.sqrt(design.network.eps_eff), "m",
                                       "physical length = c0 TD/sqrt(eps_eff) (c0/(4 f0 sqrt(eps_eff)) for a quarter wave)")
    if "feed_l" in comps:
        lf = comps["feed_l"].value
        cb_name = "bypass_c" if "bypass_c" in comps else ("block_c" if "block_c" in comps else "series_c")
        cb = comps[cb_name].value
        fb = 1.0 / (2 * PI * math.sqrt(lf * cb))
        zb = math.sqrt(lf / cb)
        derived["bias_resonance_hz"] = (fb, "Hz", f"1/(2 pi sqrt(L_feed C_{cb_name[:-2]})), the slowest pole of the bias network")
        derived["bias_damping"] = (design.load_ohm / (2.0 * zb), "",
                                   f"zeta ~ RL/(2 sqrt(L_feed/C_{cb_name[:-2]})): a series loop closed through roughly RL (estimate)")
    return SizedDesign(design=design, ropt_ohm=ropt, components=comps, derived=derived,
                       idc_est_a=idc, pout_est_w=pout_est)


def _lossless(design: Design) -> Design:
    """``design`` with lossless components (inductor Q inf, no ESR, no line loss)."""
    import dataclasses

    net = dataclasses.replace(design.network, inductor_q=math.inf, capacitor_esr_ohm=0.0, line_loss_db=0.0)
    return dataclasses.replace(design, network=net)


def drain_hf_capacitance(sized: SizedDesign) -> float:
    """Capacitance the drain sees at harmonics far above the network's resonances, F.

    Only class_f_lumped has one: the DC block, the resonator capacitors (each resonator tends to
    its capacitor above its resonance) and the shunt tank capacitor in series (the tank inductor
    and a lowpass match's series inductor are open there). The line topologies present a line
    (about Z0, resistive), class_f_feed's output starts with an inductor, and class E's shunt C
    is discharged at zero voltage by design: 0 for them.
    """
    from .topologies import resolve_topology

    if resolve_topology(sized.design).name != "class_f_lumped":
        return 0.0
    names = ["block_c", "tank_c"] + [n for n in sized.components if n.startswith("res") and n.endswith("_c")]
    return 1.0 / sum(1.0 / sized.value(n) for n in names)


def cout_switching_loss(sized: SizedDesign) -> float:
    """Expected loss of the device output capacitance in a class-F switch design, W.

    The square drain voltage is about 2 Vdd when the switch closes: 1/2 Cout (2 Vdd)^2 f0 is
    dumped into the switch (energy of a charged capacitor). With transmission lines Cout carries
    a series resistance (:func:`netgen.render.cout_series_ohm`) that also takes the charging
    energy at turn-off, so twice that. Class E and inverse class F switch at (near) zero voltage:
    0. Our estimate; it only seeds the warm start.
    """
    from .topologies import resolve_topology

    d = sized.design
    if d.device.model != "switch" or d.device.cout_f <= 0.0:
        return 0.0
    if resolve_topology(d).name not in ("class_f_line", "class_f_feed", "class_f_lumped"):
        return 0.0
    has_line = any(c.kind == "Z0" for c in sized.components.values())
    return (2.0 if has_line else 1.0) * 0.5 * d.device.cout_f * (2.0 * d.vdd_v) ** 2 * d.f0_hz


def switch_dc_estimate(sized: SizedDesign, pout_w: float, veff_v: float) -> dict:
    """Expected DC supply current of a switch (or user SPICE) device, A.

    Parameters
    ----------
    sized : SizedDesign
        The sized network (``idc_est_a`` not yet set).
    pout_w : float
        ``a Vdd_eff^2 / R`` of the waveform class (module docstring), W.
    veff_v : float
        Effective supply, V.

    Returns
    -------
    dict
        ``idc_a``, ``pfund_w`` (fundamental drain power), ``pcap_w`` (hard-switching loss),
        ``eta_bound``, ``how``.

    Notes
    -----
    The switch sets the drain voltage (its fundamental is that of the class's ideal waveform),
    so the fundamental power follows the admittance the sized network really presents at f0,
    losses included: ``P1 = a Vdd_eff^2 Re(Y1)/Re(Y1_lossless)`` (Y1 from
    :func:`netgen.network.z_drain` of the sized and of the lossless network; the ratio is 1
    for ideal parts). The supply then delivers ``P1/eta_b`` (``eta_b``: the ideal efficiency
    bound of the harmonics the network controls, :func:`netgen.theory.bound_for`; Raab 2001)
    plus the hard-switching loss ``1/2 C_hf (2 Vdd)^2 f0`` of the capacitance the drain sees at
    high harmonics (:func:`drain_hf_capacitance`; in class F the drain is at about 2 Vdd just
    before turn-on, the square wave). ``Idc = (P1/eta_b + P_cap)/Vdd_eff`` (Vdd_eff carries the
    Ron drop, as in the sizing). Our own first-order estimate; it only seeds the warm start.
    Measured against settled simulations of every example within 10 % (tests/test_sizing.py).
    """
    import numpy as np

    from .network import z_drain
    from .theory import bound_for

    design = sized.design
    f0 = design.f0_hz
    ratio, how_g = 1.0, ""
    try:
        y1 = (1.0 / z_drain(sized, np.array([f0])))[0].real
        lossless = SizedDesign(design=_lossless(design), ropt_ohm=sized.ropt_ohm, components=sized.components)
        y1_ideal = (1.0 / z_drain(lossless, np.array([f0])))[0].real
        if y1 > 0 and y1_ideal > 0:
            ratio, how_g = y1 / y1_ideal, " Re(Y1)/Re(Y1 lossless)"
    except (KeyError, ValueError, ZeroDivisionError, FloatingPointError):
        ratio = 1.0  # a network z_drain cannot model (e.g. a user template's own parts)
    pfund = pout_w * ratio
    bound = bound_for(sized).get("efficiency") or 1.0
    pcap = 0.5 * drain_hf_capacitance(sized) * (2.0 * design.vdd_v) ** 2 * f0
    pcap += cout_switching_loss(sized)
    idc = (pfund / bound + pcap) / veff_v
    how = (f"Idc = (P1/eta_b + P_cap)/Vdd_eff, P1 = P x{how_g} {ratio:.4g}, eta_b = {bound:.4g} "
           f"(theory.bound_for, Raab 2001), P_cap = {pcap:.4g} W hard switching (our estimate)")
    return {"idc_a": idc, "pfund_w": pfund, "pcap_w": pcap, "eta_bound": bound, "how": how}


def _veff_how(design: Design) -> str:
    m = design.device.model
    if m == "switch":
        return "Vdd_eff = Vdd - Ron Idc/duty (mean on-state drop of the switch; our estimate)"
    if m == "gm":
        return "Vdd_eff = Vdd - Vknee (common practice; Cripps)"
    return "Vdd_eff = Vdd (user device: no drop assumed)"


def _apply_overrides(design: Design, comps: dict[str, Component], topo: str) -> dict[str, Component]:
    out = dict(comps)
    for name, text in design.network.values.items():
        key = f"network.values.{name}"
        if name not in comps:
            close = difflib.get_close_matches(name, list(comps), n=1, cutoff=0.4)
            hint = f"did you mean '{close[0]}'?" if close else "valid names: " + ", ".join(comps)
            raise DesignError(f"{key}: {topo} has no component '{name}'; {hint}")
        comp = comps[name]
        value = parse_quantity(text, comp.unit, key)
        if not (value > 0):
            raise DesignError(f"{key}: {value:g} {comp.unit} is not positive; give a value > 0.")
        out[name] = Component(name, comp.kind, value, "set in [network.values]", comp.role, comp.lossy)
    return out


# ---------------------------------------------------------------- sized design file

def sized_toml_text(sized: SizedDesign) -> str:
    """A fully valued design file: the input keys plus ``[network.values]`` with every component.

    Values are written with full float precision (``repr``) so that loading the file back
    and sizing gives identical values; a comment beside each says how it was obtained.
    """
    import tomlkit

    raw = sized.design.raw or {}
    doc = tomlkit.document()
    doc.add(tomlkit.comment(f"Sized design '{sized.design.name}' written by netgen; edit and load again."))
    doc.add(tomlkit.comment("[network.values] holds every component; each overrides sizing when loaded."))
    for section, table in raw.items():
        if not isinstance(table, dict):
            continue
        t = tomlkit.table()
        for key, value in table.items():
            if section == "network" and key == "values":
                continue
            t.add(key, value)
        if section == "network":
            t.add("values", _values_table(sized))
        doc.add(section, t)
    if "network" not in raw:
        t = tomlkit.table()
        t.add("values", _values_table(sized))
        doc.add("network", t)
    return tomlkit.dumps(doc)


def _values_table(sized: SizedDesign):
    """``[network.values]``: every component, with how it was obtained as the comment."""
    import tomlkit

    vals = tomlkit.table()
    for comp in sized.components.values():
        item = tomlkit.item(f"{comp.value!r} {comp.unit}")
        item.comment(f"{format_quantity(comp.value, comp.unit)}: {comp.how}")
        vals.add(comp.name, item)
    return vals


def write_sized_toml(sized: SizedDesign, path: str | Path) -> Path:
    """Write :func:`sized_toml_text` to ``path`` atomically (temp file + os.replace)."""
    import os
    import tempfile

    from .errors import OutputError

    path = Path(path)
    text = sized_toml_text(sized)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write the sized design ({exc.strerror}); check the folder.") from None
    return path
