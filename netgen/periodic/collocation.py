"""Nonlinear devices with charges in the periodic estimate: periodic collocation (harmonic balance).

A device given as several nonlinear elements between internal nodes -- ``B`` current sources
whose expression :func:`netgen.netlist.device_expression` reads and SPICE junction diodes ``D``
(the angelov device of templates/devices.j2: the Angelov I-V as a B source, Cgs and Cgd as
junction diodes, the reverse-conduction diode, with device.cds_law = "junction" the drain-source
junction DCDS) -- obeys at its nodes

    i(t) = F(v(t)) + dQ(v(t))/dt

(Kirchhoff's current law with a memoryless current F and a charge Q). The rest of the circuit is
the linear network of :mod:`netgen.periodic.estimator`, reduced to its multi-port impedance at the
nodes the elements touch: ``v = v_oc + Z (*) i`` per frequency bin. On the estimate's uniform grid
of M points per period the charge's derivative is the same difference operator the simulator
integrates with, diagonal in the discrete Fourier transform (``I_k = s_k Q_k``, :func:`s_bins`),
and the periodic problem is one set of P*M nonlinear equations (P port nodes) solved by Newton's
method with a line search: the harmonic-balance / periodic-collocation formulation of
K. S. Kundert, A. Sangiovanni-Vincentelli and J. K. White, "Steady-state methods for simulating
analog and microwave circuits" (Kluwer, 1990; the time-domain collocation form on the grid, with
the frequency-domain linear part). The Jacobian is dense: block (q, c) is
``delta_qc - sum_p [Z_qp G_pc + (Z D)_qp C_pc]`` with ``Z_qp`` and ``(Z D)_qp`` circulant and
``G``, ``C`` the diagonal small-signal conductances and capacitances on the grid.

The SPICE3 junction diode (recalled from memory, as ngspice implements it): ``I = IS
(exp(V / (N Vt)) - 1)``, Vt = k T / q at 27 C, and the depletion charge ``Q = CJO VJ (1 - (1 -
V/VJ)^(1-M)) / (1 - M)`` for V < FC VJ, continued above by the quadratic whose capacitance is
``CJO (F3 + M V / VJ) / F2`` (F2 = (1 - FC)^(1+M), F3 = 1 - FC (1 + M)). A diode with series
resistance, transit time or breakdown is refused (:class:`Unsupported`).
"""

from __future__ import annotations

import math
import re
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from netgen.netlist import GROUND, Card, Unsupported, device_expression, spice_value

__all__ = ["blas_single_thread", "NonlinearElement", "port_list", "read_elements", "has_multinode_device", "s_bins", "xmu_of", "solve_ports",
           "NEWTON_MAX", "MAX_UNKNOWNS", "THERMAL_VOLTAGE_V"]

#: Newton iterations allowed before the estimate is given up
NEWTON_MAX = 80
#: largest number of unknowns (ports x grid points) of the dense Newton system; the grid is
#: coarsened to stay below it (a 3072^2 solve takes about a second)
MAX_UNKNOWNS = 3072
#: k T / q at ngspice's nominal 27 C (300.15 K), V
THERMAL_VOLTAGE_V = 1.380649e-23 * 300.15 / 1.602176634e-19
#: largest residual at which Newton's method stops, relative to the largest open-circuit port
#: voltage: on the full grid and on the coarse grids of the nested iteration
NEWTON_TOL = 1e-10
COARSE_TOL = 1e-4
#: a residual at which a stalled Newton's method (a fresh Jacobian's step that the line search
#: cannot shorten into a descent: the precision floor of the finite-difference Jacobian) is taken
#: as converged, relative as NEWTON_TOL. Measured: a 2 GHz class-B stage of the lv_gan_2w device
#: behind a lowpass input match stalled at 1.3e-9 for 70 steps and was given up; 1e-8 of a 12 V
#: swing is 0.12 uV, far below what the estimate's 0.2 % bound against ngspice can see
NEWTON_STALL_TOL = 1e-8
#: a step with the previous Jacobian (the chord method) is kept while it cuts the residual at
#: least this much; otherwise the Jacobian is formed and factored again
CHORD_RATE = 0.3
#: smallest grid of the nested iteration in solve_ports
COARSE_MIN = 48
#: exponent above which a diode's exponential is continued linearly (currents of 1e3 A and more,
#: never on a solution; keeps Newton's first steps finite)
EXP_LIMIT = 40.0


@dataclass
class NonlinearElement:
    """A two-terminal nonlinear element: current ``current(V)`` from ``a`` through it to ``b`` (A)
    and charge ``charge(V)`` (C, on ``a`` against ``b``; None for none); ``V`` maps node names
    to voltage arrays (V) and holds zeros for ground."""

    name: str
    a: str
    b: str
    controls: tuple
    current: object
    charge: object = None
    kind: str = "B"
    #: a diode's (N Vt in V, IS in A), for the junction limiting of Newton's steps
    limits: tuple = ()


#: threadpoolctl's controller, made on first use (False: threadpoolctl is not installed)
_BLAS_CONTROLLER = None
#: blas_single_thread blocks open in this thread of control (an inner one costs nothing)
_BLAS_DEPTH = 0


@contextmanager
def blas_single_thread():
    """One BLAS thread inside the block (threadpoolctl, when installed).

    The estimate's dense solves are small (at most ``MAX_UNKNOWNS`` unknowns); with a threaded
    BLAS on a loaded machine each factorisation waits for its second thread's time slice:
    measured with 2 cores shared by other jobs, 20 LU factorisations of 150 unknowns took 2.9 s
    with OpenBLAS's 2 threads and 0.027 s with one. The controller (which scans the loaded
    libraries, ~4 ms) is made once per process; a block inside another is free (a study wraps its
    points in one, netgen.studies.execute).
    """
    global _BLAS_CONTROLLER, _BLAS_DEPTH
    if _BLAS_CONTROLLER is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # pragma: no cover - a dependency; without it the solves are only slower
            _BLAS_CONTROLLER = False
        else:
            _BLAS_CONTROLLER = ThreadpoolController()
    if _BLAS_CONTROLLER is False or _BLAS_DEPTH:  # no threadpoolctl, or inside such a block already
        yield
        return
    with _BLAS_CONTROLLER.limit(limits=1, user_api="blas"):
        _BLAS_DEPTH += 1
        try:
            yield
        finally:
            _BLAS_DEPTH -= 1


def xmu_of(cards: list[Card]) -> float:
    """ngspice's trapezoidal damping ``xmu`` from the ``.options`` cards (0.5: undamped)."""
    xmu = 0.5
    for c in cards:
        if c.text.lower().startswith(".options"):
            m = re.search(r"\bxmu\s*=\s*([^\s]+)", c.text, re.IGNORECASE)
            if m:
                xmu = spice_value(m.group(1), ".options xmu")
    return float(xmu)


def s_bins(theta: np.ndarray, h_s: float, xmu: float = 0.5) -> np.ndarray:
    """The derivative operator of the simulator's integration per bin, 1/s.

    ngspice's second-order trapezoidal rule with damping xmu is ``(1 - xmu) i_n + xmu i_(n-1) =
    (q_n - q_(n-1)) / h`` (its NIcomCof/NIintegrate coefficients, recalled from memory; xmu = 0.5
    is the plain trapezoidal rule), so in periodic steady state ``I_k = s_k Q_k`` with
    ``s_k = (1 - z^-1) / (h ((1 - xmu) + xmu z^-1))``, z = exp(j theta_k). For xmu = 0.5 this is
    the bilinear transform ``(2/h) j tan(theta/2)``, whose Nyquist value is capped as before.
    """
    if abs(xmu - 0.5) < 1e-12:
        return 1j * (2.0 / h_s) * np.tan(np.minimum(theta / 2, math.pi / 2 * (1 - 1e-9)))
    zi = np.exp(-1j * theta)
    return (1.0 - zi) / (h_s * ((1.0 - xmu) + xmu * zi))


def _diode(card: Card, models: dict) -> NonlinearElement:
    t = card.tokens
    if len(t) < 4:
        raise Unsupported(f"{t[0]}: a diode without a model")
    kind, pars = models.get(t[3].upper(), ("", {}))
    if kind != "D":
        raise Unsupported(f"{t[0]}: diode model '{t[3]}' is not a D model")
    for key in ("RS", "TT", "BV"):
        if pars.get(key, 0.0):
            raise Unsupported(f"{t[0]}: a diode with {key} (the periodic estimate models IS, N, CJO, VJ, M, FC only)")
    extra = [x for x in t[4:] if not x.lower().startswith("ic=")]
    if extra:
        raise Unsupported(f"{t[0]}: diode instance parameters '{' '.join(extra)}'")
    i_s, n = pars.get("IS", 1e-14), pars.get("N", 1.0)
    cjo, vj, mj, fc = pars.get("CJO", pars.get("CJ0", 0.0)), pars.get("VJ", 1.0), pars.get("M", 0.5), pars.get("FC", 0.5)
    nvt = n * THERMAL_VOLTAGE_V
    a, b = t[1].lower(), t[2].lower()

    def current(V):
        x = (V[a] - V[b]) / nvt
        xc = np.minimum(x, EXP_LIMIT)
        return i_s * (np.exp(xc) * (1.0 + (x - xc)) - 1.0)

    charge = None
    if cjo > 0:
        f1 = vj * (1.0 - (1.0 - fc) ** (1.0 - mj)) / (1.0 - mj)
        f2 = (1.0 - fc) ** (1.0 + mj)
        f3 = 1.0 - fc * (1.0 + mj)
        vfc = fc * vj

        def charge(V):
            v = V[a] - V[b]
            low = np.minimum(v, vfc)
            q_dep = vj * (1.0 - (1.0 - low / vj) ** (1.0 - mj)) / (1.0 - mj)
            over = np.maximum(v - vfc, 0.0)
            q_hi = f1 + (f3 * over + mj / (2.0 * vj) * ((vfc + over) ** 2 - vfc ** 2)) / f2
            return cjo * np.where(v < vfc, q_dep, q_hi)

    return NonlinearElement(t[0], a, b, tuple(x for x in (a, b) if x not in GROUND), current, charge, "D", (nvt, i_s))


def _bsource(card: Card) -> NonlinearElement:
    t = card.tokens
    m = re.match(r"\s*i\s*=\s*(.*)$", " ".join(t[3:]), re.IGNORECASE)
    if not m:
        raise Unsupported(f"{t[0]}: a B source that is not a current (I=)")
    f, nodes = device_expression(m.group(1).strip().strip("{}'\""), t[0])
    if "time" in nodes:
        raise Unsupported(f"{t[0]}: a device expression of time")
    ctrl = tuple(sorted(x for x in nodes if x not in GROUND))

    def current(V):
        vals = dict(V)
        vals["0"] = vals["gnd"] = 0.0
        return f(vals)

    return NonlinearElement(t[0], t[1].lower(), t[2].lower(), ctrl, current, None, "B")


def has_multinode_device(cards: list[Card]) -> bool:
    """True when the netlist's device is made of diodes or of B sources other than one from
    ``dsw`` to ground (then :func:`read_elements` and :func:`solve_ports` estimate it)."""
    for c in cards:
        if c.text.startswith("."):
            continue
        if c.name[0] == "D":
            return True
        if c.name[0] == "B" and [x.lower() for x in c.tokens[1:3]] not in (["dsw", "0"], ["dsw", "gnd"]):
            return True
    return False


def read_elements(cards: list[Card], models: dict) -> list[NonlinearElement]:
    """Every ``B`` and ``D`` element of the netlist as a :class:`NonlinearElement`."""
    out = []
    for c in cards:
        if c.text.startswith("."):
            continue
        if c.name[0] == "D":
            out.append(_diode(c, models))
        elif c.name[0] == "B":
            out.append(_bsource(c))
    return out


def _ports(elements: list[NonlinearElement]) -> list[str]:
    nodes = set()
    for e in elements:
        nodes.update((e.a, e.b, *e.controls))
    return sorted(x for x in nodes if x not in GROUND)


def _voltages(ports: list[str], v: np.ndarray) -> dict:
    V = {p: v[k] for k, p in enumerate(ports)}
    zero = np.zeros(v.shape[1])
    for g in GROUND:
        V[g] = zero
    return V


def _deriv(fun, V: dict, node: str, dv: float) -> np.ndarray:
    up, dn = dict(V), dict(V)
    up[node] = V[node] + dv
    dn[node] = V[node] - dv
    return (fun(up) - fun(dn)) / (2.0 * dv)


def _limit_junctions(elements: list[NonlinearElement], V: dict, ports: list[str], step: np.ndarray):
    """The Newton step with each sample scaled so that no diode's junction voltage rises by more
    than SPICE's junction limiting allows (pnjlim: above the critical voltage a forward step is
    cut to the logarithm of its exponential, L. W. Nagel, "SPICE2", 1975, recalled from memory);
    and whether any sample was cut."""
    pidx = {p: k for k, p in enumerate(ports)}
    alpha = np.ones(step.shape[1])
    for e in elements:
        if e.kind != "D":
            continue
        nvt, i_s = e.limits
        vcrit = nvt * math.log(nvt / (math.sqrt(2.0) * i_s))
        v_old = V[e.a] - V[e.b]
        dv = (step[pidx[e.a]] if e.a in pidx else 0.0) - (step[pidx[e.b]] if e.b in pidx else 0.0)
        v_new = v_old + dv
        cut = (v_new > vcrit) & (np.abs(dv) > 2.0 * nvt)
        if not cut.any():
            continue
        with np.errstate(all="ignore"):
            arg = 1.0 + dv / nvt
            lim = np.where(v_old > 0, np.where(arg > 0, v_old + nvt * np.log(np.maximum(arg, 1e-300)), vcrit),
                           nvt * np.log(np.maximum(v_new / nvt, 1e-300)))
            frac = np.clip((lim - v_old) / np.where(dv == 0, 1.0, dv), 0.0, 1.0)
        alpha = np.where(cut, np.minimum(alpha, frac), alpha)
    limited = bool((alpha < 1.0).any())
    return step * alpha[None, :], limited


def solve_ports(elements: list[NonlinearElement], ports: list[str], voc_k: np.ndarray, zdraw_k: np.ndarray,
                s_k: np.ndarray, M: int) -> np.ndarray:
    """Current drawn from each port node by the elements on the grid, (P, M) A.

    Parameters
    ----------
    elements : list of NonlinearElement
    ports : list of str
        The port nodes (every non-ground node an element touches or reads), in the order of
        ``voc_k`` and ``zdraw_k``.
    voc_k : ndarray (K, P)
        rfft of the port voltages with no element current (V x M).
    zdraw_k : ndarray (K, P, P)
        Voltage at port q per unit current drawn from port p, per bin (ohm; minus the
        multi-port impedance).
    s_k : ndarray (K,)
        The integration's derivative operator per bin (:func:`s_bins`), 1/s.
    M : int
        Grid points per period.

    The Newton iterations far from the solution (a gate junction driven from reverse into
    forward conduction needs tens of them) are done on coarser grids first -- M/2, M/4 ... down
    to ``COARSE_MIN`` points, the network's bins below the coarse Nyquist frequency kept -- and
    each solution, interpolated by zero-padding its spectrum, starts the next finer grid
    (nested iteration; W. Hackbusch, "Multi-Grid Methods and Applications", 1985, recalled from
    memory); on the full grid Newton's method then converges in a few steps.
    """
    levels = [M]
    while levels[-1] // 2 >= COARSE_MIN and (levels[-1] // 2) % 2 == 0:
        levels.append(levels[-1] // 2)
    v0 = None
    for m in reversed(levels):
        kc = m // 2 + 1
        voc_c = voc_k[:kc] * (m / M)
        zd_c = zdraw_k[:kc].copy()
        s_c = s_k[:kc].copy()
        if m < M:  # the coarse Nyquist bin of a real kernel is real
            voc_c[-1] = voc_c[-1].real
            zd_c[-1] = zd_c[-1].real
            s_c[-1] = s_c[-1].real if s_c[-1].real else abs(s_c[-1])
        if v0 is not None:
            spec = np.fft.rfft(v0, axis=1)
            pad = np.zeros((v0.shape[0], kc), complex)
            pad[:, :spec.shape[1]] = spec * (m / v0.shape[1])
            pad[:, spec.shape[1] - 1] *= 0.5  # the old Nyquist bin splits into +-k
            v0 = np.fft.irfft(pad, m, axis=1)
        v0, inj = _newton(elements, ports, voc_c, zd_c, s_c, m, v0, NEWTON_TOL if m == M else COARSE_TOL)
    return inj


def _newton(elements: list[NonlinearElement], ports: list[str], voc_k: np.ndarray, zdraw_k: np.ndarray,
            s_k: np.ndarray, M: int, v0: np.ndarray | None, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Damped Newton's method for :func:`solve_ports` on one grid from ``v0`` (default: the
    open-circuit port voltages) until the largest residual is below ``tol`` times the largest
    open-circuit voltage; (port voltages, drawn currents), both (P, M).

    The LU factors of the Jacobian are kept while steps with them still cut the residual by
    ``CHORD_RATE`` (the chord method), since a factorisation of the P M unknowns costs what many
    solves with it do.

    Length: one damped Newton iteration in its order (the residual by FFTs, the step from the
    kept or a fresh factorisation, the junction limiting and the line search); the pieces share
    a dozen arrays that mean nothing apart.
    """
    P = len(ports)
    pidx = {p: k for k, p in enumerate(ports)}
    voc = np.fft.irfft(voc_k, M, axis=0).T  # (P, M)
    kz = np.fft.irfft(zdraw_k, M, axis=0)  # (M, q, p)
    kzd = np.fft.irfft(zdraw_k * s_k[:, None, None], M, axis=0)
    circ_idx = (np.arange(M)[:, None] - np.arange(M)[None, :]) % M
    zdraw_m = np.moveaxis(zdraw_k, 0, -1)  # (q, p, K)
    scale = max(float(np.abs(voc).max()), 1.0)
    dv = 1e-6 * scale

    def ddt(x: np.ndarray) -> np.ndarray:
        return np.fft.irfft(s_k * np.fft.rfft(x), M)

    def injections(v: np.ndarray):
        V = _voltages(ports, v)
        inj = np.zeros((P, M))
        for e in elements:
            i = e.current(V)
            if e.charge is not None:
                i = i + ddt(e.charge(V))
            if e.a in pidx:
                inj[pidx[e.a]] += i
            if e.b in pidx:
                inj[pidx[e.b]] -= i
        return inj

    def residual(v: np.ndarray):
        inj = injections(v)
        zi = np.fft.irfft(np.einsum("qpk,pk->qk", zdraw_m, np.fft.rfft(inj, axis=1)), M, axis=1)
        return v - voc - zi, inj

    from scipy.linalg import lu_factor, lu_solve  # imported here: `pashape --help` loads no scipy

    v = voc.copy() if v0 is None else v0
    r, inj = residual(v)
    lu = None
    for _ in range(NEWTON_MAX):
        fresh = lu is None
        V = _voltages(ports, v)
        if fresh:
            lu = lu_factor(_jacobian(elements, ports, V, kz, kzd, circ_idx, dv, M), check_finite=False)
        step = lu_solve(lu, -r.ravel(), check_finite=False).reshape(P, M)
        if not np.all(np.isfinite(step)):
            raise Unsupported("the device equations could not be solved (singular Jacobian)")
        step, limited = _limit_junctions(elements, V, ports, step)
        lam, norm0 = 1.0, float(np.linalg.norm(r))
        while True:
            v_new = v + lam * step
            r_new, inj_new = residual(v_new)
            norm = float(np.linalg.norm(r_new))
            if not fresh or limited or norm <= (1 - 0.25 * lam) * norm0 or lam < 1e-4:
                break
            lam *= 0.5
        stalled = fresh and not limited and norm > (1 - 0.25 * lam) * norm0
        if stalled and float(np.abs(r).max()) < NEWTON_STALL_TOL * scale:
            break  # stalled at the Jacobian's precision floor, already within NEWTON_STALL_TOL
        if not fresh and (limited or norm > CHORD_RATE * norm0):
            lu = None  # the old Jacobian no longer contracts fast enough: a fresh Newton step
            continue
        v, r, inj = v_new, r_new, inj_new
        if float(np.abs(r).max()) < tol * scale:
            break
    else:
        raise Unsupported(f"the device equations did not converge in {NEWTON_MAX} Newton steps")
    return v, inj


def _jacobian(elements, ports, V, kz, kzd, circ_idx, dv, M) -> np.ndarray:
    """The dense Jacobian of :func:`_newton`'s residual, (P M, P M): block (q, c) is
    ``delta_qc I - sum_p (Z_qp G_pc + (Z D)_qp C_pc)`` (module docstring)."""
    P = len(ports)
    pidx = {p: k for k, p in enumerate(ports)}
    G = np.zeros((P, P, M))
    C = np.zeros((P, P, M))
    for e in elements:
        for node in e.controls:
            c = pidx[node]
            g = _deriv(e.current, V, node, dv)
            cap = _deriv(e.charge, V, node, dv) if e.charge is not None else None
            for term, sign in ((e.a, 1.0), (e.b, -1.0)):
                if term in pidx:
                    G[pidx[term], c] += sign * g
                    if cap is not None:
                        C[pidx[term], c] += sign * cap
    J = np.eye(P * M)
    for q in range(P):
        for p in range(P):
            zc = kz[:, q, p][circ_idx]
            zdc = kzd[:, q, p][circ_idx]
            for c in range(P):
                if G[p, c].any() or C[p, c].any():
                    J[q * M:(q + 1) * M, c * M:(c + 1) * M] -= zc * G[p, c][None, :] + zdc * C[p, c][None, :]
    return J


def port_list(elements: list[NonlinearElement]) -> list[str]:
    """The port nodes of :func:`solve_ports`, sorted."""
    return _ports(elements)
