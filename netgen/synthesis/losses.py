"""Losses that depend on frequency: the laws, and the passive ladders that realise them in SPICE.

A part specified by its loss at f0 (an inductor by its unloaded Q, a capacitor by its ESR, a line
by its loss in dB) loses differently at the harmonics. The laws (docs/losses.md):

* inductor, ``constant_q``: ``R(f) = omega L / Q`` (proportional to f; the part keeps its Q);
  ``skin``: ``R(f) = (omega0 L / Q) sqrt(f/f0)`` (skin-effect conductor loss, Pozar, "Microwave
  Engineering", surface resistance R_s = sqrt(omega mu / (2 sigma))); ``fixed``: ``omega0 L / Q``.
* capacitor, ``constant_esr``: ESR at every frequency; ``constant_q``: a constant loss tangent,
  ``ESR(f) = tan(delta) / (omega C) = ESR0 f0/f``.
* line: ``alpha(f) = a_c sqrt(f/f0) + a_d f/f0`` (conductor plus dielectric attenuation, Pozar,
  ch. 2-3: the conductor term follows R_s, the dielectric term omega tan(delta)); ``fixed``: the f0
  loss at every frequency.

ngspice cannot take a frequency-dependent resistance, so a law other than a constant is realised as
a passive ladder in series with the part: ``R0`` plus sections ``R_k || L_k`` (an inductor or a line
resistor; the Foster form of the skin-effect ladder of Kim & Neikirk, "Compact equivalent circuit
model for the skin effect", IEEE MTT-S 1996) or ``R_k || C_k`` (a capacitor's falling ESR). The
section corner frequencies are fixed (octaves from f0/2 to 8 N f0) and the values come from a non-negative least-squares fit at the harmonics f0 .. N f0
(N = max(5, sim.harmonics)), with the part's main L or C fitted beside them so that the reactance
at f0 is the designed one. The fit is homogeneous in impedance (targets, columns and weights all
scale with the part's f0 reactance), so it is made once per law and r/|X0| for a part of
|X0| = 1 ohm and scaled: parts of one Q share it. Only R, L and C appear, so the portable dialect carries it, and the
periodic estimate, which reads the netlist, sees exactly what ngspice sees.

A passive (causal) impedance cannot have an arbitrary resistance with a fixed reactance: Bode's
gain-phase relation (Kramers-Kronig) ties them. A resistance that rises with frequency comes with a
reactance that falls slightly (for a constant-Q inductor by about (2/pi) ln(f/f0)/Q of omega L).
The fit therefore holds the resistance tight at every harmonic and the reactance exactly at f0, and
lets the reactance at the harmonics move by what causality asks; :func:`fit_report` gives both.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from netgen.design import SizedDesign

from .builder import digits12

__all__ = [
    "LossNet",
    "loss_net",
    "line_loss_net",
    "loss_ohm",
    "r_law_ohm",
    "line_r_law_ohm",
    "z_loss_net",
    "fit_harmonics",
    "fit_report",
    "LINE_SEGMENTS_LOSSY",
]

#: number of lossless T segments a lossy line is split into (RLOSS resistors between them).
#: Measured on sims/demo.toml, 100 cycles in ngspice 39: 8 segments 10.9 s, 4 -> 3.9 s,
#: 3 -> 2.6 s, lossless 1.0 s (every segment adds breakpoints). 3 keeps the loss spread
#: over the line (a single middle resistor would sit at a current null at 2 f0).
LINE_SEGMENTS_LOSSY = 3

#: weight of a reactance residual against a resistance residual (both relative to the law's R)
#: at the harmonics above f0; at f0 the reactance is held with weight _X_ANCHOR
_X_WEIGHT = 0.03
_X_ANCHOR = 100.0
#: the same for a line's loss element, whose reactance should stay near 0 at every harmonic (a
#: reactance between the segments mismatches them)
_X_WEIGHT_LINE = 0.03


@dataclass(frozen=True)
class LossNet:
    """A part with its loss: the main element and the series ladder that realises the law.

    Attributes
    ----------
    kind : str
        ``L`` (main element an inductor, H), ``C`` (a capacitor, F) or ``R`` (a line's loss
        resistor: no main element).
    main : float
        Value rendered for the main element (H or F); the designed value where the law is a
        constant. 0 for kind ``R``.
    r0_ohm : float
        Series resistance (0: none).
    sections : tuple of (float, float)
        ``(R_k ohm, L_k H)`` for ``R_k || L_k`` sections (kind L and R) or ``(R_k ohm, C_k F)``
        for ``R_k || C_k`` sections (kind C).
    """

    kind: str
    main: float
    r0_ohm: float
    sections: tuple = ()

    @property
    def lossy(self) -> bool:
        return self.r0_ohm > 0 or bool(self.sections)

    def impedance_scaled(self, k: float) -> LossNet:
        """The same ladder with every impedance times ``k`` (resistances and inductances x k,
        capacitances / k): Z(w) becomes k Z(w) at every frequency."""
        if self.kind == "C":
            return LossNet("C", self.main / k, self.r0_ohm * k, tuple((r * k, c / k) for r, c in self.sections))
        return LossNet(self.kind, self.main * k, self.r0_ohm * k, tuple((r * k, x * k) for r, x in self.sections))


def fit_harmonics(sized: SizedDesign) -> int:
    """Highest harmonic N the ladders are fitted at (f0 .. N f0): max(5, sim.harmonics)."""
    return max(5, int(sized.design.sim.harmonics))


# ---------------------------------------------------------------- the laws

def loss_ohm(sized: SizedDesign, name: str) -> float:
    """Series loss resistance of component ``name`` at f0, ohm (the law's value there).

    Inductor: ``omega0 L / Q`` with Q = network.inductor_q (unloaded Q at f0; inf -> 0).
    Capacitor: network.capacitor_esr. Components with ``lossy=False`` (the feed choke,
    whose loss is a DC resistance, not omega0 L / Q) and lines: 0. How it scales with
    frequency (:func:`r_law_ohm`) and the ladder that realises it: the module docstring.
    Scalar arithmetic: the network model asks for it per part and evaluation.
    """
    comp = sized.components[name]
    net = sized.design.network
    if not comp.lossy or comp.kind not in "LC":
        return 0.0
    if comp.kind == "L":
        if math.isinf(net.inductor_q):
            return 0.0
        return 2 * math.pi * sized.design.f0_hz * comp.value / net.inductor_q
    return float(net.capacitor_esr_ohm)


def r_law_ohm(sized: SizedDesign, name: str, f_hz) -> np.ndarray:
    """The law's series loss resistance of component ``name`` at ``f_hz`` (ohm, ndarray):
    :func:`loss_ohm` (the f0 value) scaled by network.inductor_loss_law (inductors) or
    network.capacitor_loss_law (capacitors); 0 for parts without loss.
    """
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    r0 = loss_ohm(sized, name)
    if r0 == 0.0:
        return np.zeros_like(f)
    kind = sized.components[name].kind
    net = sized.design.network
    law = net.inductor_loss_law if kind == "L" else net.capacitor_loss_law
    return r0 * _scale(law, kind, f / sized.design.f0_hz)


_SCALES = {
    "fixed": lambda x: np.ones_like(x),
    "constant_esr": lambda x: np.ones_like(x),
    "skin": np.sqrt,
}


def _scale(law: str, kind: str, x: np.ndarray) -> np.ndarray:
    """The law's R(f)/R(f0) at x = f/f0 for a part of ``kind`` (L or C)."""
    if law == "constant_q":
        return x if kind == "L" else 1.0 / x
    return _SCALES[law](x)


def line_r_law_ohm(sized: SizedDesign, base: str, f_hz) -> np.ndarray:
    """The law's value of each of the k-1 series resistors of lossy line ``base`` (ohm, ndarray).

    The line loses ``dB(f) = line_loss (1 - s) sqrt(f/f0) + line_loss s f/f0`` (s =
    network.line_dielectric_share; ``fixed``: ``line_loss``). A series R between matched Z0
    lines passes |S21| = 1/(1 + R/(2 Z0)) (Pozar, ABCD -> S conversion), so each of the k-1
    resistors is ``R = 2 Z0 (10^(dB/(20 (k-1))) - 1)``.
    """
    net = sized.design.network
    return _line_r_law(sized.value(f"{base}_z0"), float(sized.design.f0_hz), float(net.line_loss_db),
                       net.line_loss_law, float(net.line_dielectric_share), f_hz)


def _line_r_law(z0: float, f0_hz: float, db0: float, law: str, share: float, f_hz) -> np.ndarray:
    """:func:`line_r_law_ohm` from the numbers it depends on."""
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    x = f / f0_hz
    if law == "fixed":
        db = np.full_like(x, db0)
    else:
        db = db0 * ((1.0 - share) * np.sqrt(x) + share * x)
    return 2.0 * z0 * (10 ** (db / (20.0 * (LINE_SEGMENTS_LOSSY - 1))) - 1.0)


# ---------------------------------------------------------------- realisation

def z_loss_net(net: LossNet, w) -> np.ndarray:
    """Impedance of the part with its ladder at angular frequencies ``w`` (rad/s), ohm."""
    w = np.asarray(w, dtype=float)
    z = np.full(w.shape, complex(net.r0_ohm))
    if net.kind == "L":
        z = z + 1j * w * net.main
    elif net.kind == "C":
        z = z + 1.0 / (1j * w * net.main)
    if net.sections:  # every section at once, summed in order (bit for bit the one-by-one sum)
        r, x = np.array(net.sections, dtype=float).T
        jw = 1j * w[..., None]
        terms = r / (1.0 + jw * r * x) if net.kind == "C" else jw * x * r / (r + jw * x)
        for k in range(len(r)):
            z = z + terms[..., k]
    return z


def _corner_taus(f0_hz: float, n_max: int) -> np.ndarray:
    """Time constants L_k/R_k of the sections: corners an octave apart from f0/2 to >= 8 N f0."""
    octaves = int(math.ceil(math.log2(16 * n_max))) + 1
    return 1.0 / (2 * math.pi * f0_hz * 0.5 * 2.0 ** np.arange(octaves))


def _nnls(a: np.ndarray, r_t: np.ndarray, x_t: np.ndarray, anchor: bool, x_weight: float = _X_WEIGHT) -> np.ndarray:
    """Non-negative least squares of the complex columns ``a`` to ``r_t + j x_t``: resistance
    residuals relative to r_t, reactance residuals weighted by _X_WEIGHT (at f0 by _X_ANCHOR)."""
    from scipy.optimize import nnls

    wr = 1.0 / r_t
    wx = x_weight / r_t
    if anchor:
        wx[0] = _X_ANCHOR / r_t[0]
    aw = np.vstack([a.real * wr[:, None], a.imag * wx[:, None]])
    bw = np.concatenate([r_t * wr, x_t * wx])
    return nnls(aw, bw, maxiter=50 * aw.shape[1])[0]


@functools.lru_cache(maxsize=4096)
def _fit(kind: str, law: str, value: float, r_f0: float, f0_hz: float, n_max: int) -> LossNet:
    """Fit of main element + R0 + fixed-corner sections to the law at f0 .. n_max f0.

    Inductor: Z = R0 + j w L_main + sum R_k || L_k; capacitor: Z = R0 + 1/(j w C_main) +
    sum R_k || C_k (each section's resistance falls above its corner as an ESR proportional to 1/f
    asks); the same corners in both.
    """
    n = np.arange(1, n_max + 1, dtype=float)
    w = 2 * math.pi * f0_hz * n
    r_t = r_f0 * _scale(law, kind, n)
    tau = _corner_taus(f0_hz, n_max)
    if kind == "C":
        cols = [np.ones_like(w) + 0j, 1.0 / (1j * w * value)] + [1.0 / (1.0 + 1j * w * t) for t in tau]
        x_t = -1.0 / (w * value)
    else:
        cols = [np.ones_like(w) + 0j, 1j * w * value] + [1j * w * t / (1.0 + 1j * w * t) for t in tau]
        x_t = w * value
    sol = _nnls(np.array(cols).T, r_t, x_t, anchor=True)
    tiny = 1e-9 * r_f0
    keep = [(float(rk), float(t)) for rk, t in zip(sol[2:], tau) if rk > tiny]
    if sol[1] <= 0:  # no main element left (never seen: the f0 reactance is held): keep the law's f0 value
        return LossNet(kind, value, r_f0)
    if kind == "C":
        main = value / float(sol[1])  # the column was 1/(j w value): sol[1] = value / C_main
        secs = tuple((rk, t / rk) for rk, t in keep)  # C_k = tau_k / R_k
    else:
        main = float(sol[1]) * value
        secs = tuple((rk, rk * t) for rk, t in keep)  # L_k = R_k tau_k
    # to 12 digits (digits12): the ladder's values enter the sized-design digest, and 12 digits are
    # far finer than the fit's own agreement with the law (fit_report)
    g = digits12
    return LossNet(kind, g(main), g(float(sol[0])) if sol[0] > tiny else 0.0, tuple((g(a), g(b)) for a, b in secs))


def loss_net(sized: SizedDesign, name: str) -> LossNet:
    """The rendered form of L or C component ``name`` with its loss (:class:`LossNet`).

    Lossless parts and constant laws: the designed value and a single series resistance
    (the law at f0). Other laws: the fitted ladder (module docstring).
    """
    comp = sized.components[name]
    f0 = sized.design.f0_hz
    r_f0 = loss_ohm(sized, name)
    net = sized.design.network
    law = net.inductor_loss_law if comp.kind == "L" else net.capacitor_loss_law
    if r_f0 <= 0 or law in ("fixed", "constant_esr"):
        return LossNet(comp.kind, comp.value, max(r_f0, 0.0))
    # the fit is homogeneous in impedance (the law's targets, the columns and the weights all scale
    # with the part's f0 reactance |X0|; the corners are fixed): fitted once for a part of
    # |X0| = 1 ohm at this r/|X0| and scaled, so parts of one Q share one fit (a tolerance sweep's
    # inductors: r = omega0 L / Q)
    w0 = 2 * math.pi * float(f0)
    x0 = w0 * comp.value if comp.kind == "L" else 1.0 / (w0 * comp.value)
    unit = _fit(comp.kind, law, 1.0 / w0, r_f0 / x0, float(f0), fit_harmonics(sized))
    return unit.impedance_scaled(x0)


def line_loss_net(sized: SizedDesign, base: str) -> LossNet:
    """Each series loss element of lossy line ``base`` (kind ``R``): a resistor, or its ladder."""
    net = sized.design.network
    return _line_loss_net(sized.value(f"{base}_z0"), float(sized.design.f0_hz), float(net.line_loss_db),
                          net.line_loss_law, float(net.line_dielectric_share), fit_harmonics(sized))


@functools.lru_cache(maxsize=256)
def _line_loss_net(z0: float, f0_hz: float, db0: float, law: str, share: float, n_max: int) -> LossNet:
    """:func:`line_loss_net` from the numbers it depends on (a sweep's points share a line)."""
    r_f0 = float(_line_r_law(z0, f0_hz, db0, law, share, f0_hz)[0])
    if r_f0 <= 0 or law == "fixed":
        return LossNet("R", 0.0, max(r_f0, 0.0))
    r_t = _line_r_law(z0, f0_hz, db0, law, share, np.arange(1, n_max + 1, dtype=float) * f0_hz)
    return _fit_line_cached(tuple(float(v) for v in r_t), f0_hz)


@functools.lru_cache(maxsize=1024)
def _fit_line_cached(r_t: tuple, f0_hz: float) -> LossNet:
    """Fit of R0 + sections R_k || L_k to the line resistor's law (no main element, reactance 0)."""
    r_t = np.asarray(r_t)
    w = 2 * math.pi * f0_hz * np.arange(1, len(r_t) + 1, dtype=float)
    tau = _corner_taus(f0_hz, len(r_t))
    cols = [np.ones_like(w) + 0j] + [1j * w * t / (1.0 + 1j * w * t) for t in tau]
    sol = _nnls(np.array(cols).T, r_t, np.zeros_like(r_t), anchor=False, x_weight=_X_WEIGHT_LINE)
    tiny = 1e-9 * float(r_t[0])
    secs = tuple((float(rk), float(rk * t)) for rk, t in zip(sol[1:], tau) if rk > tiny)
    return LossNet("R", 0.0, float(sol[0]) if sol[0] > tiny else 0.0, secs)


def fit_report(net: LossNet, r_law, x_design, w) -> dict:
    """How a ladder follows its law at ``w`` (rad/s): ``r_err`` (largest |R_fit/R_law - 1|) and
    ``x_err`` (largest |X_fit - X_design| / |X_design|, 0 where X_design is 0: then relative to R).

    ``r_law``, ``x_design``: the law's resistance and the designed reactance at ``w`` (ohm).
    """
    z = z_loss_net(net, w)
    r_law = np.asarray(r_law, float)
    x_design = np.asarray(x_design, float)
    r_err = float(np.max(np.abs(z.real / r_law - 1.0)))
    den = np.where(np.abs(x_design) > 0, np.abs(x_design), r_law)
    x_err = float(np.max(np.abs(z.imag - x_design) / den))
    return {"r_err": r_err, "x_err": x_err}
