"""The intrinsic plane: the device's current generator behind its output capacitance and package.

Waveform engineering is defined at the current generator (Cripps, "RF Power Amplifiers for
Wireless Communications", the intrinsic/package planes of the class-F and inverse-F
discussion; Grebennikov, "RF and Microwave Power Amplifier Design", class-F load networks
with the device output capacitance; both recalled from memory). Between the generator and the
drain terminal, where the output network connects, sit the device's output capacitance Cout
(shunt, at the generator), and optionally its package: a series inductance Ld (bond wire)
followed by a shunt capacitance Cp at the terminal::

    generator --+-- Ld --+-- drain terminal (package plane) -- network
                |        |
               Cout      Cp

This module holds the two-way transformation between the planes (circuit theory: series and
shunt elements in cascade), the de-embedded f0 target (what the network must present at the
drain terminal so that the generator sees Ropt; the embedding idea of the load-pull practice,
common practice) and the harmonic compensator (a shunt Foster reactance network at the drain
terminal that cancels Cout at the controlled harmonics, R. M. Foster, "A reactance theorem",
Bell System Technical Journal, 1924: any positive-element LC one-port has a reactance that
rises with frequency between its poles and zeros, so a set of series-LC branches is fixed by
its susceptance at as many frequencies as it has branches).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from netgen.errors import SizingError

from .builder import CLASS_COEFF, E_SHUNT_K

__all__ = ["Parasitics", "parasitics", "to_intrinsic", "f0_target_admittance", "compensator_plan",
           "compensator_susceptance", "controlled_pattern", "compensated_order", "class_e_fmax_hz",
           "INV_F_BLOCK_RATIO", "SOKAL_IMAX_FACTOR"]

#: inverse F: the compensator's shunt inductor sits behind a DC block whose series resonance is
#: at f0/INV_F_BLOCK_RATIO, far below every harmonic it acts at (our choice)
INV_F_BLOCK_RATIO = 5.0
#: inverse F: one branch resonates between f0 and 2f0 (capacitive at f0, inductive at 2f0), so
#: the compensator can cancel the device's reactance at f0 and at the even harmonics at once
INV_F_MID = 1.5
#: peak switch current over DC current in ideal class E, Imax = 2.862 Idc (Raab 1977)
SOKAL_IMAX_FACTOR = 2.862


@dataclass(frozen=True)
class Parasitics:
    """The device's own parts between the generator and the drain terminal (F, H, F)."""

    cout_f: float = 0.0
    ld_h: float = 0.0
    cp_f: float = 0.0

    @property
    def any(self) -> bool:
        return self.cout_f > 0 or self.ld_h > 0 or self.cp_f > 0

    @property
    def capacitive(self) -> bool:
        return self.cout_f > 0 or self.cp_f > 0


def parasitics(design) -> Parasitics:
    """Cout, package Ld and Cp of ``design.device``."""
    dev = design.device
    return Parasitics(float(dev.cout_f), float(getattr(dev, "package_l_h", 0.0) or 0.0),
                      float(getattr(dev, "package_c_f", 0.0) or 0.0))


def to_intrinsic(z_pkg: np.ndarray, f_hz, par: Parasitics) -> np.ndarray:
    """Impedance the generator sees, from the impedance ``z_pkg`` at the drain terminal, ohm.

    ``Z_int = 1 / (j w Cout + 1 / (j w Ld + 1 / (j w Cp + 1/Z_pkg)))`` (series and shunt
    elements in cascade, circuit theory). Infinite ``z_pkg`` (an ideal open) is allowed.
    """
    w = 2 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float))
    z = np.asarray(z_pkg, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.where(np.isinf(z), 0.0, 1.0 / z) + 1j * w * par.cp_f
        z = np.where(y == 0, np.inf, 1.0 / y) + 1j * w * par.ld_h
        y = np.where(np.isinf(z), 0.0, 1.0 / z) + 1j * w * par.cout_f
        return np.where(y == 0, np.inf + 0j, 1.0 / y)


def _deembed(z_int: complex, w: float, par: Parasitics) -> complex:
    """The drain-terminal impedance that makes the generator see ``z_int`` (the inverse cascade)."""
    y = 1.0 / z_int - 1j * w * par.cout_f
    z = 1.0 / y - 1j * w * par.ld_h
    y = 1.0 / z - 1j * w * par.cp_f
    return 1.0 / y


def compensated_order(design) -> int:
    """How many harmonics the compensator resonates: ``network.harmonics`` (default 2)."""
    return int(design.network.harmonics)


def compensator_plan(design, wave_class: str, ropt_ohm: float, known_b=None) -> list[tuple[float, float]]:
    """Series-LC branches from the drain terminal to ground that cancel Cout (and the package)
    at the controlled harmonics: ``[(resonance_hz, inductance_h), ...]``; empty without parasitics.

    Parameters
    ----------
    design : Design
    wave_class : str
        ``F`` (opens wanted at the odd harmonics 3 .. 2K+1, and the device's reactance
        cancelled at f0) or ``invF`` (opens at the even harmonics 2 .. 2K),
        K = :func:`compensated_order`.
    ropt_ohm : float
        The resistance the generator is to see at f0, ohm.
    known_b : callable, optional
        ``known_b(f_hz)``: susceptance (S) of other shunt parts at the drain terminal (the
        feed choke), taken into account.

    Notes
    -----
    At a controlled harmonic n the network beyond presents an open (class F at odd n: the
    quarter-wave line or the lumped resonators; inverse F at even n: the quarter-wave line
    ending in the series resonator). The generator then sees an open when the drain terminal
    shows the reactance ``X_P = 1/(n w0 Cout) - n w0 Ld`` (Ld + X_P resonates Cout), so the
    shunt parts there must add up to ``B = -1/X_P`` (``-n w0 Cout`` without Ld): the
    compensator provides ``B_comp(n) = -1/X_P - n w0 Cp``.

    Class F: a shunt inductor behind a DC block (series resonance f0/5) and traps resonating
    in series at the even harmonics 2f0, 4f0, .. 2K f0 (where the network wants shorts anyway;
    Grebennikov's harmonic traps, recalled from memory), inductive at the odd harmonics above
    them. Inverse F: the shunt inductor behind its block, a branch resonating at 1.5 f0 and
    traps at the odd harmonics 3f0 .. (2K-1) f0. In both, one more condition, at f0, makes
    the compensator cancel the imaginary part of the de-embedded f0 target too, so the rest
    of the network is sized for a real resistance: its quarter-wave line keeps
    Z0 = sqrt(R RL) and carries no circulating f0 current (absorbing a large Cout in the line
    instead made a 0.3 dB line dissipate 5 W of a 2 W design). Each branch ``L_k, C_k = 1/(w_k^2 L_k)`` has the
    susceptance ``-g_k / (w (1 - w_k^2/w^2))``, ``g_k = 1/L_k``: linear in ``g``, so the
    conditions are one square solve (Foster 1924: a positive-element LC one-port).

    Raises
    ------
    SizingError
        When the solution needs a negative inductance (the package resonates below a
        controlled harmonic, or too many harmonics are asked for).

    Length: one square linear system per class (class F and inverse F), set up and checked for
    realisability side by side.
    """
    par = parasitics(design)
    if not par.capacitive:
        return []
    k_n = compensated_order(design)
    f0 = design.f0_hz
    w0 = 2 * math.pi * f0
    known = known_b or (lambda f: 0.0)
    if wave_class == "F":
        targets = [1] + [2 * k + 1 for k in range(1, k_n + 1)]
        res = [1.0 / INV_F_BLOCK_RATIO] + [2.0 * k for k in range(1, k_n + 1)]
    elif wave_class == "invF":
        targets = [1] + [2 * k for k in range(1, k_n + 1)]
        res = [1.0 / INV_F_BLOCK_RATIO, INV_F_MID] + [2.0 * k + 1 for k in range(1, k_n)]
    else:
        return []
    size = len(targets)
    a = np.zeros((size, size))
    rhs = np.zeros(size)
    for i, n in enumerate(targets):
        w = n * w0
        if n == 1:
            rhs[i] = (1.0 / _deembed(complex(ropt_ohm), w0, par)).imag - known(f0)
        else:
            x_p = (1.0 / (w * par.cout_f) if par.cout_f > 0 else math.inf) - w * par.ld_h
            if x_p == 0.0:
                raise SizingError(f"device.package_l: the package inductance resonates Cout exactly at {n} f0; "
                                  "change device.package_l or device.cout.")
            rhs[i] = -1.0 / x_p - w * par.cp_f - known(n * f0)
        for j, m in enumerate(res):
            a[i, j] = -1.0 / (w * (1.0 - (m / n) ** 2))
    g = np.linalg.solve(a, rhs)
    if not np.all(g > 0):
        raise SizingError(
            f"device.cout: no positive-element compensator resonates Cout = {par.cout_f:.4g} F "
            f"(package Ld = {par.ld_h:.4g} H, Cp = {par.cp_f:.4g} F) at "
            f"{', '.join(f'{n} f0' for n in targets if n > 1)}; lower network.harmonics, reduce the package "
            "inductance or use a device with less output capacitance."
        )
    return [(m * f0, 1.0 / gk) for m, gk in zip(res, g)]


def compensator_susceptance(plan: list[tuple[float, float]], f_hz) -> np.ndarray:
    """Susceptance of the compensator branches at ``f_hz``, S (lossless)."""
    w = 2 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float))
    b = np.zeros(w.shape)
    for fr, lval in plan:
        wr = 2 * math.pi * fr
        b = b - 1.0 / (w * lval * (1.0 - (wr / w) ** 2))
    return b


def f0_target_admittance(design, ropt_ohm: float, plan: list[tuple[float, float]],
                         extra_b_s: float = 0.0) -> complex:
    """Admittance the rest of the network must present at the drain terminal at f0, S.

    The generator sees Ropt when the drain terminal shows :func:`_deembed` of Ropt; the
    compensator's f0 susceptance (and ``extra_b_s`` of other shunt parts at the terminal) is
    taken off, so the f0 tank, resonator or match is re-tuned to absorb both (Cripps, tuning
    out the device output capacitance at f0; recalled from memory).
    """
    par = parasitics(design)
    w0 = 2 * math.pi * design.f0_hz
    y = 1.0 / _deembed(complex(ropt_ohm), w0, par)
    b_comp = float(compensator_susceptance(plan, [design.f0_hz])[0]) if plan else 0.0
    return y - 1j * (b_comp + extra_b_s)


def controlled_pattern(topology: str, design) -> dict[int, str]:
    """n -> ``"open"`` / ``"short"`` for the harmonics 2..sim.harmonics the sized network controls.

    Class F (Raab 1997, 2001): opens at odd, shorts at even harmonics; inverse F the reverse;
    tuned class B: shorts at every harmonic (Cripps); class E: none (its harmonics are not
    opens or shorts, Sokal 1975). With a device capacitance the opens stop at the compensated
    order (:func:`compensator_plan`) and Cout itself keeps the shorts above it; class_f_lumped
    controls 3f0 .. (2N+1) f0 and the even harmonics below.
    """
    n_max = int(design.sim.harmonics)
    k = int(design.network.harmonics)
    cap = parasitics(design).capacitive
    out: dict[int, str] = {}
    for n in range(2, n_max + 1):
        odd = n % 2 == 1
        if topology in ("class_f_line", "class_f_feed"):
            if not odd:
                out[n] = "short"
            elif not cap or n <= 2 * k + 1:
                out[n] = "open"
        elif topology == "class_f_lumped":
            if n <= 2 * k + 1:
                out[n] = "open" if odd else "short"
        elif topology == "inverse_f_line":
            if odd:
                out[n] = "short"
            elif not cap or n <= 2 * k:
                out[n] = "open"
        elif topology == "class_b_tuned":
            out[n] = "short"
    return out


def class_e_fmax_hz(r_ohm: float, cout_f: float, vdd_v: float | None = None, imax_a: float | None = None) -> float:
    """Highest f0 at which class E absorbs ``cout_f`` entirely, Hz.

    Sokal's shunt capacitance is C = 0.1836/(omega R); Cout <= C gives
    ``fmax = 0.1836/(2 pi R Cout)``. With R = 0.5768 Vdd^2/P and the peak switch current
    Imax = 2.862 Idc = 2.862 P/Vdd (100 % efficiency; Sokal & Sokal 1975, Raab 1977):
    ``fmax = 0.1836/(0.5768 x 2.862) Imax/(2 pi Cout Vdd) = Imax/(56.5 Cout Vdd)``, the
    published form (Raab 1977; Mader & Popovic 1995, recalled from memory). Given ``imax_a``
    and ``vdd_v`` the second form is used.
    """
    if cout_f <= 0:
        return math.inf
    if imax_a is not None and vdd_v is not None:
        k = E_SHUNT_K / (CLASS_COEFF["E"] * SOKAL_IMAX_FACTOR)
        return k * imax_a / (2 * math.pi * cout_f * vdd_v)
    return E_SHUNT_K / (2 * math.pi * r_ohm * cout_f)
