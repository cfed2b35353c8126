"""Periodic steady state computed directly from the transient netlist (netgen's warm start).

:func:`estimate` reads the transient netlist that :mod:`netgen.periodic.steady` is about to run and
computes its periodic steady state without time stepping; :func:`with_initial_state` writes
that state back into the netlist (``IC=`` on every inductor, capacitor and transmission line,
plus sources that give each line its history), so that ngspice starts on the periodic orbit
instead of spending tens to thousands of cycles reaching it. ngspice still produces every
reported number; the estimate only decides where it starts.

Method
------
Everything but the device is linear and time invariant: R, L, C, lossless lines (``T``),
independent sources. The device between ``dsw`` and ground (docs/netlist_conventions.md) is
either linear in its own voltage with a periodically varying conductance (the ``S`` switch,
the ``B`` switch with finite edges) or a memoryless nonlinearity ``i = F(t, v)`` (the
transconductance device). With ``M`` points per period and the trapezoidal rule -- the
integration the templates ask ngspice for -- the periodic solution is a set of difference
equations whose circulant structure makes them diagonal in the discrete Fourier transform:

* a capacitor has the admittance ``C s_k`` and an inductor the impedance ``L s_k`` with
  ``s_k = (2/h) j tan(pi k / M)`` (trapezoidal companion models in periodic steady state; the
  bilinear transform, any numerical-methods or digital-signal-processing text);
* a lossless line of delay TD is Branin's pair of delayed waves, ``v1 - Z0 i1 = d_k (v2 + Z0 i2)``
  and the converse, with ``d_k = exp(-j 2 pi k TD / T)`` (F. H. Branin, "Transient analysis of
  lossless transmission lines", Proc. IEEE, 1967);
* the network is assembled by modified nodal analysis (C.-W. Ho, A. E. Ruehli and P. A. Brennan,
  IEEE Trans. Circuits and Systems, 1975), one small solve per frequency bin k = 0..M/2.

The device couples the bins. As a one-port it sees ``v = v_oc - z * i`` (circular convolution
with the network's discrete impulse response at ``dsw``), solved in the time domain on the
samples where the device conducts: one dense linear solve for a switch, Newton's method for a
nonlinear device. Every other node voltage and branch current follows by superposition.

Against ngspice (sims/*.toml, 500-1000 points per cycle): DC and fundamental load power of the
estimate within 0.05 % of a 3000-cycle ngspice run; with the state written back, ngspice's first
cycles are within 0.1 % of its own settled values (docs/simulation.md, docs/benchmarks.md).

What it does not model (:class:`Unsupported`, and steady falls back to the DC warm start):
devices given as SPICE subcircuits, elements other than R/L/C/T/V/I/E/G in the network, sources
that are not periodic at f0, behavioural expressions outside a small set of functions.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from netgen.netlist import (
    GROUND,
    Card,
    SourceWaveform,
    Unsupported,
    card_params,
    device_expression,
    model_cards,
    read_cards,
    source_waveform,
    spice_value,
)

__all__ = ["Unsupported", "PeriodicState", "estimate", "grid_points"]

#: largest grid of the estimate (grid_points), for a switch and for a nonlinear device
GRID_MAX = 2048
GRID_MAX_NONLINEAR = 1024
#: on-interval samples above which the switch's system is solved as Toeplitz (_solve_on_interval; LU
#: below, where it is as fast)
TOEPLITZ_FROM = 128
#: harmonics of the port impedance kept in PeriodicState.z_port
PORT_HARMONICS = 50
#: Newton iterations allowed for a nonlinear device before the estimate is given up
NEWTON_MAX = 40
#: relative change of the device current at which Newton's method has converged
NEWTON_TOL = 1e-10


# ---------------------------------------------------------------- the linear network

@dataclass
class _Net:
    """The linear part: nodes, branch unknowns and element cards, assembled by MNA per bin."""

    cards: list
    nodes: list[str]
    branches: dict[str, int]
    sources: dict[str, SourceWaveform]

    @property
    def size(self) -> int:
        return len(self.nodes) + sum(2 if k.startswith("T") else 1 for k in self.branches)

    def node(self, name: str) -> int | None:
        return None if name in GROUND else self.index[name]

    def __post_init__(self):
        self.index = {n: i for i, n in enumerate(self.nodes)}

    def assemble(self, s: np.ndarray, theta: np.ndarray, period_s: float, points: int, t0_s: float):
        """Y (K, n, n) and source vectors (K, n) for the bins with Laplace variable ``s`` (trapezoidal)."""
        K, n, nn = len(s), self.size, len(self.nodes)
        Y = np.zeros((K, n, n), complex)
        b = np.zeros((K, n), complex)
        Y[:, np.arange(nn), np.arange(nn)] += 1e-12  # gmin, as in SPICE
        grid = t0_s + np.arange(points) * (period_s / points)

        def spectrum(src: SourceWaveform) -> np.ndarray:
            return np.fft.rfft(src.value(grid))[:K]

        def add(r, c, y):
            if r is not None and c is not None:
                Y[:, r, c] += y

        def conductance(a, bb, y):
            ia, ib = self.node(a), self.node(bb)
            add(ia, ia, y)
            add(ib, ib, y)
            add(ia, ib, -y)
            add(ib, ia, -y)

        def branch_kcl(a, bb, col):
            ia, ib = self.node(a), self.node(bb)
            add(ia, col, 1.0)
            add(ib, col, -1.0)

        def vdiff(row, a, bb, coef):
            ia, ib = self.node(a), self.node(bb)
            add(row, ia, coef)
            add(row, ib, -coef)

        for c in self.cards:
            t = c.tokens
            kind = c.name[0]
            a, bb = t[1].lower(), t[2].lower()
            if kind == "R":
                conductance(a, bb, 1.0 / spice_value(t[3].split("=")[-1], c.name))
            elif kind == "C":
                conductance(a, bb, s * spice_value(t[3], c.name))
            elif kind == "L":
                p = nn + self.branches[c.name]
                branch_kcl(a, bb, p)
                vdiff(p, a, bb, 1.0)
                Y[:, p, p] -= s * spice_value(t[3], c.name)
            elif kind == "V":
                p = nn + self.branches[c.name]
                branch_kcl(a, bb, p)
                vdiff(p, a, bb, 1.0)
                b[:, p] += spectrum(self.sources[c.name])
            elif kind == "I":
                spec = spectrum(self.sources[c.name])
                ia, ib = self.node(a), self.node(bb)
                if ia is not None:
                    b[:, ia] -= spec
                if ib is not None:
                    b[:, ib] += spec
            elif kind == "G":
                gm = spice_value(t[5], c.name)
                ca, cb = t[3].lower(), t[4].lower()
                for out_node, sign in ((a, 1.0), (bb, -1.0)):
                    r = self.node(out_node)
                    add(r, self.node(ca), sign * gm)
                    add(r, self.node(cb), -sign * gm)
            elif kind == "E":
                p = nn + self.branches[c.name]
                branch_kcl(a, bb, p)
                vdiff(p, a, bb, 1.0)
                vdiff(p, t[3].lower(), t[4].lower(), -spice_value(t[5], c.name))
            elif kind == "T":
                pars = card_params(t[5:])
                z0 = spice_value(pars["Z0"], c.name)
                d = np.exp(-1j * theta * (spice_value(pars["TD"], c.name) / period_s) * points)
                n3, n4 = t[3].lower(), t[4].lower()
                p1 = nn + self.branches[c.name]
                p2 = p1 + 1
                branch_kcl(a, bb, p1)
                branch_kcl(n3, n4, p2)
                # Branin: (v1 - Z0 i1) - d (v2 + Z0 i2) = 0 and the converse (i into the port)
                vdiff(p1, a, bb, 1.0)
                Y[:, p1, p1] -= z0
                vdiff(p1, n3, n4, -d)
                Y[:, p1, p2] -= d * z0
                vdiff(p2, n3, n4, 1.0)
                Y[:, p2, p2] -= z0
                vdiff(p2, a, bb, -d)
                Y[:, p2, p1] -= d * z0
        return Y, b


_LINEAR_KINDS = "RLCVIEGT"


def _network(cards: list[Card], device: str, period_s: float) -> tuple[_Net, set[str]]:
    """The linear elements connected (through other linear elements) to ``dsw``."""
    elements = [c for c in cards if not c.text.startswith(".")]
    adj: dict[str, set[str]] = {}

    def terminals(c: Card) -> list[str]:
        t = [x.lower() for x in c.tokens]
        if c.name[0] == "T":
            return t[1:5]
        if c.name[0] in "EG":
            return t[1:5]
        return t[1:3]

    for c in elements:
        if c.name == device:
            continue
        ns = [x for x in terminals(c) if x not in GROUND]
        for x in ns:
            adj.setdefault(x, set()).update(ns)
    seen: set[str] = set()
    stack = ["dsw"]
    while stack:
        x = stack.pop()
        if x in seen:
            continue
        seen.add(x)
        stack.extend(adj.get(x, ()))
    mine = [c for c in elements if c.name != device and any(x in seen for x in terminals(c))]
    branches: dict[str, int] = {}
    sources: dict[str, SourceWaveform] = {}
    nb = 0
    for c in mine:
        kind = c.name[0]
        if kind not in _LINEAR_KINDS:
            raise Unsupported(f"{c.tokens[0]}: element type '{kind}' in the output network")
        if kind in "RLC" and len(c.tokens) < 4:
            raise Unsupported(f"{c.tokens[0]}: no value")
        if kind in "RLC" and "=" in c.tokens[3] and not c.tokens[3].lower().startswith(("r=", "c=", "l=")):
            raise Unsupported(f"{c.tokens[0]}: value '{c.tokens[3]}'")
        if kind == "T" and not {"Z0", "TD"} <= set(card_params(c.tokens[5:])):
            raise Unsupported(f"{c.tokens[0]}: a line without Z0= and TD=")
        if kind in "EG" and len(c.tokens) != 6:
            raise Unsupported(f"{c.tokens[0]}: a controlled source other than a linear gain")
        if kind in "VI":
            sources[c.name] = source_waveform(c.tokens, period_s)
        if kind in "LVE":
            branches[c.name] = nb
            nb += 1
        elif kind == "T":
            branches[c.name] = nb
            nb += 2
    return _Net(mine, sorted(seen), branches, sources), seen


# ---------------------------------------------------------------- the device

@dataclass
class _Device:
    """The device law ``i(t_j, v_j)`` (A, drawn from ``dsw``) on the grid, and where it conducts."""

    name: str
    law: object            # callable (v (m,), idx (m,)) -> i (m,)
    linear: bool
    conductance: np.ndarray | None = None   # (M,) for linear devices: i = g v
    t0_s: float = 0.0      # grid origin (a switch's turn-on instant)


def _control(cards: list[Card], node: str, period_s: float) -> SourceWaveform:
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


def _device(cards: list[Card], models: dict, period_s: float, points: int) -> _Device:
    touching = [c for c in cards if not c.text.startswith(".") and c.name[0] not in _LINEAR_KINDS + "S"
                and "dsw" in [x.lower() for x in c.tokens[1:3]]]
    switches = [c for c in cards if c.name[0] == "S" and [x.lower() for x in c.tokens[1:3]] in (["dsw", "0"], ["dsw", "gnd"])]
    cands = switches + [c for c in touching if c.name[0] == "B"]
    others = [c for c in touching if c.name[0] != "B"]
    if others:
        raise Unsupported(f"{others[0].tokens[0]}: the device is a subcircuit or model netgen does not solve directly")
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
        ctrl = _control(cards, t[3].lower(), period_s)
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
        return _Device(t[0], lambda v, idx: g[idx] * v, True, g, ta + 0.5 * h)
    m = re.match(r"\s*i\s*=\s*(.*)$", " ".join(t[3:]), re.IGNORECASE)
    if not m or t[2].lower() not in GROUND:
        raise Unsupported(f"{t[0]}: a B source that is not a current from 'dsw' to ground")
    f, nodes = device_expression(m.group(1).strip().strip("{}'\""), t[0])
    grid = np.arange(points) * h
    values = {"time": grid}
    for x in nodes - {"dsw", "0", "gnd"}:
        values[x] = _control(cards, x, period_s).value(grid)
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
    return _Device(t[0], law, linear, g if linear else None, 0.0)


# ---------------------------------------------------------------- the periodic state

@dataclass(frozen=True)
class PeriodicState:
    """The estimated periodic steady state on a uniform grid.

    Attributes
    ----------
    f0_hz : float
    points : int
        Grid points per period (M).
    t0_s : float
        Time of grid point 0 (the switch's turn-on instant, or 0), s.
    series : dict of name -> ndarray (M,)
        Node voltages by node name (V), branch currents ``<element>#branch`` (A, ngspice's sign:
        into the first node, through the element), and for lines ``<element>#1`` / ``#2`` (A, into
        ports 1 and 2).
    lines : dict of element -> (Z0 ohm, TD s, (n1, n2, n3, n4))
    elements : dict of element -> (kind, nodes)
        The inductors, capacitors and lines of the network.
    device : str
        The device element.
    dc : dict of name -> (base, slope)
        Period mean of each node voltage and branch current as ``base + slope * Idc``, Idc the
        device's mean current (A): the network's DC solution (bin 0), which every periodic
        state of the network satisfies in its cycle means.
    peaks : dict
        Largest drain voltage ``vd_max_v`` (V) and current into the device ``id_max_a`` (A) over
        the period (where the netlist has ``drain`` and ``VIDRAIN``).
    z_port : ndarray of complex
        The network's impedance at ``dsw`` (device removed) at n f0, n = 0..PORT_HARMONICS, ohm,
        in the trapezoidal discretisation (the continuous value to (pi n / M)^2 / 3).
    """

    f0_hz: float
    points: int
    t0_s: float
    series: dict = field(repr=False)
    lines: dict = field(default_factory=dict)
    elements: dict = field(default_factory=dict, repr=False)
    device: str = ""
    dc: dict = field(default_factory=dict, repr=False)
    peaks: dict = field(default_factory=dict)
    z_port: np.ndarray = field(default_factory=lambda: np.zeros(0, complex), repr=False)

    @property
    def period_s(self) -> float:
        return 1.0 / self.f0_hz

    def at(self, name: str, t_s) -> np.ndarray:
        """``name`` at times ``t_s`` (periodic linear interpolation between grid points)."""
        x = self.series[name]
        h = self.period_s / self.points
        tt = np.mod(np.asarray(t_s, dtype=float) - self.t0_s, self.period_s)
        return np.interp(tt, np.arange(self.points + 1) * h, np.append(x, x[0]))

    def dc_state(self, idc_a: float) -> dict[str, float]:
        """Cycle means (V, A) of every node voltage and branch current for a device mean current
        ``idc_a`` (the vectors of a DC operating point, by ngspice's names)."""
        return {k: base + slope * idc_a for k, (base, slope) in self.dc.items()}

    def voltage(self, node: str) -> np.ndarray:
        return np.zeros(self.points) if node in GROUND else self.series[node]

    def mean(self, name: str) -> float:
        """Period mean (the trapezoidal rule on the periodic grid), V or A."""
        return float(np.mean(self.series[name]))

    def mean_square(self, name: str) -> float:
        """Period mean of the square, V^2 or A^2."""
        return float(np.mean(self.series[name] ** 2))

    def impedances(self, n_max: int) -> np.ndarray:
        """V_n / I_n of the drain voltage and the current into the device (``vidrain#branch``),
        n = 0..n_max (complex, ohm; the presented impedance is minus this, docs/netlist_conventions.md)."""
        v = np.fft.rfft(self.series["drain"])[:n_max + 1]
        i = np.fft.rfft(self.series["vidrain#branch"])[:n_max + 1]
        with np.errstate(all="ignore"):
            return np.where(np.abs(i) > 0, v / np.where(i == 0, 1, i), np.nan)


def grid_points(points_per_cycle: int, nonlinear: bool = False) -> int:
    """Grid size for the estimate: the simulator's points per cycle (even), at most ``GRID_MAX``
    (``GRID_MAX_NONLINEAR`` for a nonlinear device, whose Newton steps cost M^3).

    On the simulator's own step the estimate is the same trapezoidal discretisation ngspice
    integrates, so their periodic states agree closely (class E at 500 and 2000 points per
    cycle: Pdc 19.9588 / 19.9634 W from both); on a coarser grid the estimate is still within
    0.05 % of ngspice here, and the run starts with a small transient.
    """
    m = min(int(points_per_cycle), GRID_MAX_NONLINEAR if nonlinear else GRID_MAX)
    return max(m + m % 2, 8)


def estimate(netlist: str, f0_hz: float, points: int, *, cap: bool = True) -> PeriodicState:
    """Periodic steady state of a transient netlist (see the module docstring).

    Parameters
    ----------
    netlist : str
        The ngspice transient netlist (docs/netlist_conventions.md: the device between ``dsw``
        and ground).
    f0_hz : float
        Fundamental, Hz; every source must be periodic at f0.
    points : int
        Grid points per period asked for (the simulator's points per cycle; see grid_points).
    cap : bool
        Limit the grid to ``GRID_MAX`` (``GRID_MAX_NONLINEAR``) points; without, ``points``
        (made even) is used as it is.

    Returns
    -------
    PeriodicState

    Raises
    ------
    Unsupported
        Something in the netlist is outside what the direct solution models.
    """
    period = 1.0 / f0_hz
    cards = read_cards(netlist)
    models = model_cards(cards)
    M = grid_points(points) if cap else max(int(points) + int(points) % 2, 8)
    dev = _device(cards, models, period, M)
    if cap and not dev.linear and M > GRID_MAX_NONLINEAR:
        M = grid_points(points, nonlinear=True)
        dev = _device(cards, models, period, M)
    h = period / M
    net, _ = _network(cards, dev.name.upper(), period)
    if "dsw" not in net.index:
        raise Unsupported("the device node 'dsw' is not connected to the network")
    K = M // 2 + 1
    k = np.arange(K)
    theta = 2 * np.pi * k / M
    # trapezoidal rule: s_k = (2/h) j tan(theta/2); the Nyquist bin (C short, L open) is capped
    s = 1j * (2.0 / h) * np.tan(np.minimum(theta / 2, math.pi / 2 * (1 - 1e-9)))
    Y, b = net.assemble(s, theta, period, M, dev.t0_s)
    idsw = net.index["dsw"]
    draw = np.zeros_like(b)
    draw[:, idsw] = -1.0  # one unit of current drawn from dsw by the device
    try:
        X = np.linalg.solve(Y, np.stack([b, draw], axis=-1))
    except np.linalg.LinAlgError:
        raise Unsupported("the network's nodal matrix is singular (a floating node or a loop of sources)") from None
    x_src, x_draw = X[..., 0], X[..., 1]
    i_dev = _solve_device(dev, x_src[:, idsw], x_draw[:, idsw], M)
    spec = np.fft.rfft(i_dev)
    x_all = np.fft.irfft(x_src + x_draw * spec[:, None], M, axis=0)  # (M, n)
    if not np.all(np.isfinite(x_all)):
        raise Unsupported("the periodic solution is not finite")
    series: dict[str, np.ndarray] = {}
    dc: dict[str, tuple[float, float]] = {}
    nn = len(net.nodes)
    for name, i in net.index.items():
        series[name] = x_all[:, i]
        dc[name] = (float(x_src[0, i].real) / M, float(x_draw[0, i].real))
    lines = {}
    elements = {}
    for c in net.cards:
        kind = c.name[0]
        toks = [x.lower() for x in c.tokens]
        if c.name in net.branches:
            col = nn + net.branches[c.name]
            if kind == "T":
                series[f"{toks[0]}#1"] = x_all[:, col]
                series[f"{toks[0]}#2"] = x_all[:, col + 1]
                pars = card_params(c.tokens[5:])
                lines[c.tokens[0]] = (spice_value(pars["Z0"], c.name), spice_value(pars["TD"], c.name), tuple(toks[1:5]))
            else:
                series[f"{toks[0]}#branch"] = x_all[:, col]
                dc[f"{toks[0]}#branch"] = (float(x_src[0, col].real) / M, float(x_draw[0, col].real))
        if kind in "LCT":
            elements[c.tokens[0]] = (kind, tuple(toks[1:5] if kind == "T" else toks[1:3]))
    series["dsw#device"] = i_dev
    peaks = {key: float(series[name].max()) for key, name in (("vd_max_v", "drain"), ("id_max_a", "vidrain#branch"))
             if name in series}
    return PeriodicState(f0_hz=f0_hz, points=M, t0_s=dev.t0_s, series=series, lines=lines,
                         elements=elements, device=dev.name, dc=dc, peaks=peaks,
                         z_port=-x_draw[:PORT_HARMONICS + 1, idsw].copy())


def _solve_device(dev: _Device, voc_k: np.ndarray, zdraw_k: np.ndarray, M: int) -> np.ndarray:
    """Device current on the grid (A): v = voc + zdraw (*) i with i = law(v).

    ``zdraw_k``: the voltage at dsw per unit current drawn (minus the port impedance), per bin.
    """
    voc = np.fft.irfft(voc_k, M)
    kern = np.fft.irfft(zdraw_k, M)  # v = voc + circ(kern) i
    j = np.arange(M)
    if dev.linear:
        g = dev.conductance
        g0 = float(max(g.min(), 0.0))
        # fold the constant part g0 into the port: z' = z / (1 + g0 z) (z = -zdraw), voc' likewise
        z_k = -zdraw_k
        zf_k = z_k / (1.0 + g0 * z_k)
        vocf = np.fft.irfft(voc_k / (1.0 + g0 * z_k), M)
        kf = np.fft.irfft(zf_k, M)
        act = np.nonzero(g - g0 > 1e-12 * max(g.max(), 1e-30))[0]
        i_act = np.zeros(M)
        if act.size:
            # v_A = vocf_A - C i_A and i_A = dg v_A  ->  (C + diag(1/dg)) i_A = vocf_A
            i_act[act] = _solve_on_interval(kf, act, 1.0 / (g[act] - g0), vocf[act])
        v = vocf - _circ(kf, i_act)
        return g0 * v + i_act
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
                  and np.allclose(r[:-1], r[0], rtol=1e-12, atol=0.0))
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
