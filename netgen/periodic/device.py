"""The device of the periodic estimate: its law on the grid, and the one-port solve.

The device between ``dsw`` and ground (docs/netlist_conventions.md) is read from the netlist as
a law ``i(t_j, v_j)``: an ``S`` switch with an ``SW`` model or a ``B`` source whose expression
:func:`netgen.netlist.device_expression` accepts, controlled by independent sources. As a
one-port it sees ``v = v_oc - z * i`` (circular convolution with the network's discrete impulse
response at ``dsw``), solved on the samples where it conducts: one linear solve for a switch
(dense LU, or the Levinson recursion for Toeplitz systems above ``TOEPLITZ_FROM`` samples),
Newton's method for a nonlinear device. Used by :mod:`netgen.periodic.estimator`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from netgen.netlist import (
    GROUND,
    Card,
    SourceWaveform,
    Unsupported,
    device_expression,
    source_waveform,
)

__all__ = ["LINEAR_KINDS", "Device", "read_device", "control_waveform", "solve_device", "reverse_diode", "TOEPLITZ_FROM",
           "NEWTON_MAX", "NEWTON_TOL", "DIODE_MAX"]

#: element kinds of the linear network around the device (everything else is refused)
LINEAR_KINDS = "RLCVIEGT"
#: on-interval samples above which the switch's system is solved as Toeplitz (LU below, where it
#: is as fast)
TOEPLITZ_FROM = 128
#: Newton iterations allowed for a nonlinear device before the estimate is given up
NEWTON_MAX = 40
#: relative change of the device current at which Newton's method has converged
NEWTON_TOL = 1e-10
#: active-set iterations allowed for the reverse-conduction diode before the estimate is given up
DIODE_MAX = 60


#: the diodes of the angelov device (templates/devices.j2): voltage-dependent Cgs and Cgd and the
#: reverse-conduction path, the junction Cds (device.cds_law); this single-device reader declines them
#: (netgen.periodic.collocation solves them)
ANGELOV_DIODES = ("DCGS", "DCGD", "DREV", "DCDS")


@dataclass
class Device:
    """The device law ``i(t_j, v_j)`` (A, drawn from ``dsw``) on the grid, and where it conducts."""

    name: str
    law: object            # callable (v (m,), idx (m,)) -> i (m,)
    linear: bool
    conductance: np.ndarray | None = None   # (M,) for linear devices: i = g v
    t0_s: float = 0.0      # grid origin (a switch's turn-on instant)
    #: reverse conduction across the device, (Vf V, G S): i = G (v + Vf) below v = -Vf, else 0
    #: (the BREV element of templates/devices.j2); ``law`` includes it
    diode: tuple[float, float] | None = None
    #: the elements folded into the device besides ``name`` (the diode's card)
    extra: tuple[str, ...] = ()


def reverse_diode(card: Card) -> tuple[float, float] | None:
    """(Vf, G) when ``card`` is a B source from ``dsw`` to ground whose current is a
    reverse-conduction diode ``G min(v + Vf, 0)`` (A, V, S), in whatever form the expression
    takes (read by probing its law); None for any other element."""
    t = card.tokens
    m = re.match(r"\s*i\s*=\s*(.*)$", " ".join(t[3:]), re.IGNORECASE)
    if card.name[0] != "B" or not m or [x.lower() for x in t[1:3]] not in (["dsw", "0"], ["dsw", "gnd"]):
        return None
    text = m.group(1).strip().strip("{}'\"")
    if re.search(r"\btime\b", text, re.IGNORECASE):
        return None
    try:
        f, nodes = device_expression(text, t[0])
    except Unsupported:
        return None
    if nodes - {"dsw", "0", "gnd"}:
        return None

    def law(v):
        v = np.asarray(v, dtype=float)
        return np.broadcast_to(f({"dsw": v, "0": np.zeros_like(v), "gnd": np.zeros_like(v)}), v.shape).astype(float)

    with np.errstate(all="ignore"):
        if not np.all(law(np.array([0.0, 1e-3, 1.0, 10.0, 1e3])) == 0.0):
            return None
        f1, f2 = law(np.array([-2e3, -1e3]))
        g = (f2 - f1) / 1e3
        if not (np.isfinite(g) and g > 0):
            return None
        vf = float(f2 / g + 1e3)
        if not (0.0 <= vf < 1e3):
            return None
        probe = np.array([-0.5 * vf, -0.999 * vf, -vf - 1e-3, -vf - 0.1, -vf - 5.0, -vf - 300.0])
        if not np.allclose(law(probe), g * np.minimum(probe + vf, 0.0), rtol=1e-9, atol=1e-12 * g):
            return None
    return vf, float(g)


def control_waveform(cards: list[Card], node: str, period_s: float) -> SourceWaveform:
    """The waveform of a control node driven by an independent voltage source from ground."""
    for c in cards:
        t = [x.lower() for x in c.tokens]
        if c.name[0] != "V" or len(t) < 3:
            continue
        if t[1] == node and t[2] in GROUND:
            return source_waveform(c.tokens, period_s)
        if t[2] == node and t[1] in GROUND:
            return SourceWaveform("neg", (source_waveform(c.tokens, period_s),))
    raise Unsupported(f"the device's control node '{node}' is not driven by a voltage source from ground")


def read_device(cards: list[Card], models: dict, period_s: float, points: int) -> Device:
    junctions = [c for c in cards if c.name.upper() in ANGELOV_DIODES]
    if junctions:  # checked first, so the note names the reason rather than a side effect of it
        raise Unsupported(f"{junctions[0].tokens[0]}: the angelov device has nonlinear gate charges (junction diodes) "
                          "and a reverse-conduction diode, which the periodic estimate does not solve")
    touching = [c for c in cards if not c.text.startswith(".") and c.name[0] not in LINEAR_KINDS + "S"
                and "dsw" in [x.lower() for x in c.tokens[1:3]]]
    diodes = [(c, d) for c in touching for d in (reverse_diode(c),) if d is not None]
    if len(diodes) > 1:
        raise Unsupported(f"{diodes[1][0].tokens[0]}: more than one reverse-conduction element at 'dsw'")
    touching = [c for c in touching if all(c is not x for x, _ in diodes)]
    dev = _main_device(touching, cards, models, period_s, points)
    if diodes:
        (card, (vf, gd)), base = diodes[0], dev.law
        dev.law = lambda v, idx: base(v, idx) + gd * np.minimum(v + vf, 0.0)
        dev.diode, dev.extra = (vf, gd), (card.tokens[0],)
    return dev


def _main_device(touching: list[Card], cards: list[Card], models: dict, period_s: float, points: int) -> Device:
    """The switch or B-source device between ``dsw`` and ground (read_device without the diode).

    Length: the S switch's reading (model, control, state at t = 0, grid placement) and the B
    source's (expression, controls, linearity probe) are each one sequence of checks.
    """
    switches = [c for c in cards if c.name[0] == "S" and [x.lower() for x in c.tokens[1:3]] in (["dsw", "0"], ["dsw", "gnd"])]
    cands = switches + [c for c in touching if c.name[0] == "B"]
    others = [c for c in touching if c.name[0] != "B"]
    if others:
        raise Unsupported(f"{others[0].tokens[0]}: the device is a subcircuit or model pashape does not solve directly")
    if len(cands) != 1:
        raise Unsupported("the netlist has no single device element between 'dsw' and ground")
    dev = cands[0]
    t = dev.tokens
    h = period_s / points
    if dev.name[0] == "S":
        if len(t) < 6:
            raise Unsupported(f"{t[0]}: an S switch without a model")
        kind, pars = models.get(t[5].upper(), ("", {}))
        if kind != "SW":
            raise Unsupported(f"{t[0]}: switch model '{t[5]}' is not an SW model")
        ron, roff = pars.get("RON", 1.0), pars.get("ROFF", 1e12)
        vt, vh = pars.get("VT", 0.0), pars.get("VH", 0.0)
        if vh < 0:
            raise Unsupported(f"{t[0]}: a switch with negative hysteresis (smooth transition)")
        if t[4].lower() not in GROUND:
            raise Unsupported(f"{t[0]}: a switch control referred to a node other than ground")
        ctrl = control_waveform(cards, t[3].lower(), period_s)
        if ctrl.kind == "neg":
            raise Unsupported(f"{t[0]}: a switch control source connected from node to ground with reversed polarity")
        on_at = ctrl.crossings(vt + vh, period_s, rising=True)
        off_at = ctrl.crossings(vt - vh, period_s, rising=False)
        if len(on_at) != 1 or len(off_at) != 1:
            raise Unsupported(f"{t[0]}: the control does not turn the switch on and off once per period")
        ta = on_at[0]
        tb = off_at[0] if off_at[0] > ta else off_at[0] + period_s
        # ngspice starts the switch from its control voltage at t = 0; the periodic state must agree
        v_start = float(ctrl.value(np.array([0.0]))[0])
        on_at_start = (0.0 - ta) % period_s < (tb - ta)
        if not (v_start < vt - vh and not on_at_start or v_start > vt + vh and on_at_start):
            raise Unsupported(f"{t[0]}: the switch's state at t = 0 is not set by its control voltage")
        # The trapezoidal rule averages the two ends of a step, so a conductance that changes
        # between samples acts as if it switched half-way between them: the grid is placed with
        # the switching instants half-way between samples (t_j = ta + (j + 1/2) h), and each
        # sample carries the on-fraction of its cell [t_j - h/2, t_j + h/2). On a grid starting at
        # ta itself the whole periodic state came out shifted by h/2 against ngspice's (0.36
        # degrees at 500 points per cycle; powers unchanged, the states at t = 0 off by ~0.5 %).
        start = np.arange(points) * h
        w = np.clip((tb - ta - start) / h, 0.0, 1.0)
        g = 1.0 / roff + (1.0 / ron - 1.0 / roff) * w
        return Device(t[0], lambda v, idx: g[idx] * v, True, g, ta + 0.5 * h)
    m = re.match(r"\s*i\s*=\s*(.*)$", " ".join(t[3:]), re.IGNORECASE)
    if not m or t[2].lower() not in GROUND:
        raise Unsupported(f"{t[0]}: a B source that is not a current from 'dsw' to ground")
    f, nodes = device_expression(m.group(1).strip().strip("{}'\""), t[0])
    grid = np.arange(points) * h
    values = {"time": grid}
    for x in nodes - {"dsw", "0", "gnd"}:
        values[x] = control_waveform(cards, x, period_s).value(grid)
    values["0"] = values["gnd"] = np.zeros(points)

    def law(v, idx):
        vals = {k: (a[idx] if isinstance(a, np.ndarray) and a.shape == (points,) else a) for k, a in values.items()}
        vals["dsw"] = v
        out = f(vals)
        return np.broadcast_to(out, np.shape(v)).astype(float)

    idx = np.arange(points)
    probe = [law(np.full(points, x), idx) for x in (0.0, 1.0, 2.0, 10.0)]
    if not all(np.all(np.isfinite(p)) for p in probe):
        raise Unsupported(f"{t[0]}: the device expression is not finite")
    g = probe[1] - probe[0]
    linear = bool(np.allclose(probe[0], 0.0, atol=1e-15) and np.allclose(probe[2], 2 * g, rtol=1e-9, atol=1e-15)
                  and np.allclose(probe[3], 10 * g, rtol=1e-9, atol=1e-15))
    return Device(t[0], law, linear, g if linear else None, 0.0)



def solve_device(dev: Device, voc_k: np.ndarray, zdraw_k: np.ndarray, M: int) -> np.ndarray:
    """Device current on the grid (A): v = voc + zdraw (*) i with i = law(v).

    ``zdraw_k``: the voltage at dsw per unit current drawn (minus the port impedance), per bin.
    """
    voc = np.fft.irfft(voc_k, M)
    kern = np.fft.irfft(zdraw_k, M)  # v = voc + circ(kern) i
    j = np.arange(M)
    if dev.linear:
        g = dev.conductance
        if dev.diode is None:
            return _solve_linear(g, None, voc_k, zdraw_k, M)[0]
        return _solve_with_diode(g, dev.diode, voc_k, zdraw_k, M)
    # nonlinear: Newton on the voltage at the samples where the device can conduct
    probe_v = np.abs(voc).max() * np.array([-2.0, -0.5, 0.25, 1.0, 3.0]) + np.array([-1, -0.1, 0.1, 1, 10])
    can = np.zeros(M, bool)
    for pv in probe_v:
        can |= np.abs(dev.law(np.full(M, pv), j)) > 0
    act = np.nonzero(can)[0]
    if not act.size:
        return np.zeros(M)
    C = -kern[(act[:, None] - act[None, :]) % M]  # v_A = voc_A - C i_A
    v = voc[act].copy()
    i = dev.law(v, act)
    scale = max(float(np.abs(voc).max()), 1.0)
    for _ in range(NEWTON_MAX):
        r = v - voc[act] + C @ i
        dv_probe = 1e-6 * scale
        di = (dev.law(v + dv_probe, act) - dev.law(v - dv_probe, act)) / (2 * dv_probe)
        J = np.eye(act.size) + C * di[None, :]
        try:
            step = np.linalg.solve(J, -r)
        except np.linalg.LinAlgError:
            raise Unsupported("the device equation could not be solved (singular Jacobian)") from None
        lam, norm0 = 1.0, float(np.linalg.norm(r))
        while True:
            v_new = v + lam * step
            i_new = dev.law(v_new, act)
            r_new = v_new - voc[act] + C @ i_new
            if float(np.linalg.norm(r_new)) <= (1 - 0.25 * lam) * norm0 or lam < 1e-4:
                break
            lam *= 0.5
        change = float(np.abs(i_new - i).max()) / max(float(np.abs(i_new).max()), 1e-30)
        v, i = v_new, i_new
        if change < NEWTON_TOL and float(np.linalg.norm(r_new)) < 1e-9 * scale * math.sqrt(act.size):
            break
    else:
        raise Unsupported(f"the device equation did not converge in {NEWTON_MAX} Newton steps")
    out = np.zeros(M)
    out[act] = i
    return out


def _solve_linear(g: np.ndarray, c: np.ndarray | None, voc_k, zdraw_k, M: int,
                  g0: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Current and voltage (A, V) of the device ``i = g v + c`` on the grid (``c``: a known
    current, A, or None, only where g exceeds ``g0``: the conductance folded into the port,
    default the smallest of g)."""
    g0 = float(max(g.min(), 0.0)) if g0 is None else g0
    # fold the constant part g0 into the port: z' = z / (1 + g0 z) (z = -zdraw), voc' likewise
    z_k = -zdraw_k
    zf_k = z_k / (1.0 + g0 * z_k)
    vocf = np.fft.irfft(voc_k / (1.0 + g0 * z_k), M)
    kf = np.fft.irfft(zf_k, M)
    act = np.nonzero(g - g0 > 1e-12 * max(g.max(), 1e-30))[0]
    i_act = np.zeros(M)
    if act.size:
        # v_A = vocf_A - C i_A and i_A = dg v_A + c_A  ->  (C + diag(1/dg)) i_A = vocf_A + c_A/dg
        dg = g[act] - g0
        rhs = vocf[act] if c is None else vocf[act] + c[act] / dg
        i_act[act] = _solve_on_interval(kf, act, 1.0 / dg, rhs)
    v = vocf - _circ(kf, i_act)
    return g0 * v + i_act, v


def _solve_with_diode(g: np.ndarray, diode: tuple[float, float], voc_k, zdraw_k, M: int) -> np.ndarray:
    """A linear device with the reverse-conduction diode ``G min(v + Vf, 0)`` across it (A).

    The diode makes the law piecewise linear; on a guessed set D of conducting samples it is the
    linear device ``i = (g + G) v + G Vf`` there, solved exactly (:func:`_solve_linear`). D is
    then replaced by the samples with ``v < -Vf`` until it repeats: Newton's method on a
    piecewise-linear equation (an active-set method; each step is one linear solve, and a
    solution found is the exact one). It starts from the device without the diode, so a
    periodic state that never reaches -Vf costs one solve and is the same as before. Raises
    Unsupported after ``DIODE_MAX`` steps.
    """
    vf, gd = diode
    on = np.zeros(M, bool)
    seen: set[bytes] = set()
    for _ in range(DIODE_MAX):
        # the switch's own smallest conductance is folded into the port, so every diode sample
        # (g + G > g0) carries its G Vf in the solve, even were the diode on everywhere
        i, v = _solve_linear(g + gd * on, np.where(on, gd * vf, 0.0), voc_k, zdraw_k, M, g0=float(max(g.min(), 0.0)))
        tol = 1e-9 * max(float(np.abs(v).max()), 1.0)
        new = np.where(np.abs(v + vf) <= tol, on, v < -vf)  # at the knee either side is exact
        if np.array_equal(new, on):
            return i
        key = np.packbits(new).tobytes()
        if key in seen:  # a cycle of sets: the step is not contracting here
            break
        seen.add(key)
        on = new
    raise Unsupported("the reverse-conduction diode's conducting intervals did not settle "
                      f"in {DIODE_MAX} steps of the periodic estimate")


def _solve_on_interval(kernel: np.ndarray, act: np.ndarray, r: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve (C + diag(r)) x = rhs, C[a, b] = kernel[(act_a - act_b) mod M].

    For one contiguous on-interval with the same r everywhere but the last sample (a switch),
    C + r0 I is Toeplitz: above ``TOEPLITZ_FROM`` samples, Levinson recursion
    (scipy.linalg.solve_toeplitz, O(n^2)) with the last sample's difference added by the
    Sherman-Morrison formula; the residual is checked and a dense LU solve used when it is not
    small (or the samples are not contiguous, or fewer).
    """
    M = len(kernel)
    n = act.size
    contiguous = (n > TOEPLITZ_FROM and act[-1] - act[0] == n - 1
                  and bool(np.all(np.abs(r[:-1] - r[0]) <= 1e-12 * abs(r[0]))))  # np.allclose(rtol=1e-12, atol=0)
    if contiguous:
        from scipy.linalg import solve_toeplitz

        col = kernel[np.arange(n) % M].copy()
        row = kernel[(-np.arange(n)) % M].copy()
        col[0] += r[0]
        row[0] = col[0]
        e = np.zeros(n)
        e[-1] = 1.0
        try:
            xy = solve_toeplitz((col, row), np.column_stack([rhs, e]))
            x, y = xy[:, 0], xy[:, 1]
            delta = r[-1] - r[0]
            x = x - (delta * x[-1] / (1.0 + delta * y[-1])) * y
            full = np.zeros(M)
            full[act] = x
            residual = _circ(kernel, full)[act] + r * x - rhs  # C x + diag(r) x - rhs, by FFT
            if np.linalg.norm(residual) <= 1e-9 * max(np.linalg.norm(rhs), 1e-300):
                return x
        except (np.linalg.LinAlgError, ValueError, ZeroDivisionError):
            pass
    dense = kernel[(act[:, None] - act[None, :]) % M]
    return np.linalg.solve(dense + np.diag(r), rhs)


def _circ(kernel: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Circular convolution sum_l kernel[(j - l) mod M] x[l]."""
    M = len(kernel)
    return np.fft.irfft(np.fft.rfft(kernel) * np.fft.rfft(x), M)
