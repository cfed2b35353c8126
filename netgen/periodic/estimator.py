"""Periodic steady state computed directly from the transient netlist (pashape's warm start).

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

A Touchstone block (an ``X`` card of the subcircuit a ``blocks`` entry names) is stamped from
its file's S-parameters in each bin (``_Net._stamp_block``), not from the fitted subcircuit
ngspice runs; see docs/touchstone_blocks.md.

What it does not model (:class:`Unsupported`, and steady falls back to the DC warm start):
devices given as SPICE subcircuits, elements other than R/L/C/T/V/I/E/G in the network, sources
that are not periodic at f0, behavioural expressions outside a small set of functions.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from netgen.netlist import (
    GROUND,
    Card,
    SourceWaveform,
    Unsupported,
    card_params,
    model_cards,
    read_cards,
    source_waveform,
    spice_value,
)

from . import collocation
from .condense import TERM_BINS, TERM_CONST, TERM_OVER_S, TERM_TIMES_S, Stamps, remember, solve_condensed
from .device import LINEAR_KINDS, read_device, solve_device

__all__ = ["Unsupported", "PeriodicState", "estimate", "grid_points"]

#: largest grid of the estimate (grid_points), for a switch and for a nonlinear device
GRID_MAX = 2048
GRID_MAX_NONLINEAR = 1024
#: harmonics of the port impedance kept in PeriodicState.z_port
PORT_HARMONICS = 50


# ---------------------------------------------------------------- the linear network

@dataclass
class _Net:
    """The linear part: nodes, branch unknowns and element cards, assembled by MNA per bin."""

    cards: list
    nodes: list[str]
    branches: dict[str, int]
    sources: dict[str, SourceWaveform]
    #: branch unknowns per element (2 for a line, one per port for a Touchstone block, else 1)
    widths: dict[str, int] = field(default_factory=dict)
    #: Touchstone blocks by subcircuit name (netgen.netlist.touchstone.Block)
    blocks: dict = field(default_factory=dict)

    @property
    def size(self) -> int:
        return len(self.nodes) + sum(self.widths.get(k, 1) for k in self.branches)

    def node(self, name: str) -> int | None:
        return None if name in GROUND else self.index[name]

    def __post_init__(self):
        self.index = {n: i for i, n in enumerate(self.nodes)}
        self._values: dict[str, float] = {}
        self._lines: dict[str, tuple[float, float]] = {}
        self._spectra: dict[tuple, np.ndarray] = {}

    def value(self, c: Card) -> float:
        """The value of an R, L or C card (read once per network: both assemblies and the
        inductor-current recovery use it)."""
        v = self._values.get(c.name)
        if v is None:
            t = c.tokens
            v = self._values[c.name] = spice_value(t[3].split("=")[-1] if c.name[0] == "R" else t[3], c.name)
        return v

    def line(self, c: Card) -> tuple[float, float]:
        """(Z0 ohm, TD s) of a T card (read once per network)."""
        v = self._lines.get(c.name)
        if v is None:
            pars = card_params(c.tokens[5:])
            v = self._lines[c.name] = (spice_value(pars["Z0"], c.name), spice_value(pars["TD"], c.name))
        return v

    def folded_columns(self) -> dict[str, int]:
        """Branch name -> first column in the system without inductor branches (``fold_inductors``)."""
        cols, at = {}, len(self.nodes)
        for name, _ in sorted(self.branches.items(), key=lambda kv: kv[1]):
            if name[0] != "L":
                cols[name] = at
                at += self.widths.get(name, 1)
        return cols

    @property
    def structure(self) -> int:
        """What the stamps' placement and the state's collection depend on: the node list and every
        element's kind, name and nodes (not its values), as a small number (equal for networks that
        put the same terms into the same entries; the tuple is hashed once per network)."""
        s = self.__dict__.get("_structure")
        if s is None:
            key = (tuple(self.nodes), tuple(tuple(c.tokens) if c.name[0] == "X"
                                             else tuple(c.tokens[:5 if c.name[0] in "TEG" else 3]) for c in self.cards))
            s = _STRUCTURES.get(key)
            if s is None:
                s = remember(_STRUCTURES, key, next(_STRUCTURE_NUMBERS), _STRUCTURES_MAX)
            self.__dict__["_structure"] = s
        return s

    def spectrum(self, name: str, t0_s: float, period_s: float, points: int) -> np.ndarray:
        """rfft of source ``name`` on the grid ``t0_s + k period_s/points`` (once per network: both
        assemblies ask)."""
        key = (name, t0_s, period_s, points)
        got = self._spectra.get(key)
        if got is None:
            grid = t0_s + np.arange(points) * (period_s / points)
            got = self._spectra[key] = np.fft.rfft(self.sources[name].value(grid))
        return got

    def assemble(self, s: np.ndarray, theta: np.ndarray, period_s: float, points: int, t0_s: float, *,
                 first_bin: int = 0, fold_inductors: bool = False):
        """Y (K, n, n) and source vectors (K, n) for the bins ``first_bin ..`` with Laplace variable
        ``s`` (trapezoidal). With ``fold_inductors`` (every s non-zero) an inductor is stamped as
        its admittance 1/(sL) instead of a branch unknown (same solution, fewer unknowns: the
        columns are :meth:`folded_columns`). The dense form of :meth:`assemble_entries`.
        """
        entries, b = self.assemble_entries(s, theta, period_s, points, t0_s, first_bin=first_bin,
                                           fold_inductors=fold_inductors)
        return entries.dense(b.shape[1]), b

    def assemble_entries(self, s: np.ndarray, theta: np.ndarray, period_s: float, points: int, t0_s: float, *,
                         first_bin: int = 0, fold_inductors: bool = False):
        """The non-zero entries of Y over the bins (:class:`netgen.periodic.condense.Entries`) and
        the source vectors b (K, n), as :meth:`assemble`. A network's matrix is sparse (a few
        entries per element in an n x n matrix), so it is kept by entry: the stamps and the node
        condensation (solve_condensed) touch only these, and only the part left after the
        condensation is made dense. Each stamp is a sum of terms (a constant, a value times s, a
        value over s, values over the bins) put into entries with a sign (condense.Stamps).

        Length: one modified-nodal-analysis stamp per element kind (R, L, C, V, I, E, G, T),
        side by side so the stamps can be checked against each other.
        """
        nn = len(self.nodes)
        cols = self.folded_columns() if fold_inductors else {k: nn + v for k, v in self.branches.items()}
        K = len(s)
        n = self.size - (sum(1 for k in self.branches if k[0] == "L") if fold_inductors else 0)
        st = Stamps((self.structure, fold_inductors, n))
        put, term, one = st.put, st.term, st.one
        place = st.where is not None  # a new structure: where the terms go is recorded (else known)
        gmin = term(TERM_CONST, 1e-12)  # on every node, as in SPICE
        for i in range(nn if place else 0):
            put(i, i, gmin)
        b = np.zeros((K, n), complex)
        node = self.node

        def spectrum(name: str) -> np.ndarray:
            return self.spectrum(name, t0_s, period_s, points)[first_bin:first_bin + K]

        def conductance(t, y):
            ia, ib = node(t[1].lower()), node(t[2].lower())
            put(ia, ia, y)
            put(ib, ib, y)
            put(ia, ib, y, -1.0)
            put(ib, ia, y, -1.0)

        def branch_kcl(a, bb, col):
            put(node(a.lower()), col, one)
            put(node(bb.lower()), col, one, -1.0)

        def vdiff(row, a, bb, coef):
            put(row, node(a.lower()), coef)
            put(row, node(bb.lower()), coef, -1.0)

        for c in self.cards:
            kind = c.name[0]
            # each stamp: its terms (every time), then where they go (a new structure only)
            if kind == "R":
                y = term(TERM_CONST, 1.0 / self.value(c))
                if place:
                    conductance(c.tokens, y)
            elif kind == "C":
                y = term(TERM_TIMES_S, self.value(c))
                if place:
                    conductance(c.tokens, y)
            elif kind == "L" and fold_inductors:
                y = term(TERM_OVER_S, 1.0 / self.value(c))
                if place:
                    conductance(c.tokens, y)
            elif kind == "L":
                y = term(TERM_TIMES_S, -self.value(c))
                if place:
                    t, p = c.tokens, cols[c.name]
                    branch_kcl(t[1], t[2], p)
                    vdiff(p, t[1], t[2], one)
                    put(p, p, y)
            elif kind == "V":
                p = cols[c.name]
                b[:, p] += spectrum(c.name)
                if place:
                    t = c.tokens
                    branch_kcl(t[1], t[2], p)
                    vdiff(p, t[1], t[2], one)
            elif kind == "I":
                t = c.tokens
                spec = spectrum(c.name)
                ia, ib = node(t[1].lower()), node(t[2].lower())
                if ia is not None:
                    b[:, ia] -= spec
                if ib is not None:
                    b[:, ib] += spec
            elif kind == "G":
                t = c.tokens
                gm = term(TERM_CONST, spice_value(t[5], c.name))
                if place:
                    ca, cb = node(t[3].lower()), node(t[4].lower())
                    for r, sign in ((node(t[1].lower()), 1.0), (node(t[2].lower()), -1.0)):
                        put(r, ca, gm, sign)
                        put(r, cb, gm, -sign)
            elif kind == "E":
                t, p = c.tokens, cols[c.name]
                gain = term(TERM_CONST, -spice_value(t[5], c.name))
                if place:
                    branch_kcl(t[1], t[2], p)
                    vdiff(p, t[1], t[2], one)
                    vdiff(p, t[3], t[4], gain)
            elif kind == "X":
                self._stamp_block(c, s, st, branch_kcl, vdiff, cols[c.name], place)
            elif kind == "T":
                z0, td = self.line(c)
                d = np.exp(-1j * theta * (td / period_s) * points)
                # Branin: (v1 - Z0 i1) - d (v2 + Z0 i2) = 0 and the converse (i into the port)
                mz0, md, mdz0 = term(TERM_CONST, -z0), term(TERM_BINS, -d), term(TERM_BINS, -d * z0)
                if place:
                    t, p1 = c.tokens, cols[c.name]
                    p2 = p1 + 1
                    branch_kcl(t[1], t[2], p1)
                    branch_kcl(t[3], t[4], p2)
                    vdiff(p1, t[1], t[2], one)
                    put(p1, p1, mz0)
                    vdiff(p1, t[3], t[4], md)
                    put(p1, p2, mdz0)
                    vdiff(p2, t[3], t[4], one)
                    put(p2, p2, mz0)
                    vdiff(p2, t[1], t[2], md)
                    put(p2, p1, mdz0)
        return st.entries(s), b

    def _stamp_block(self, c: Card, s, st: Stamps, branch_kcl, vdiff, p0: int, place: bool) -> None:
        """A Touchstone block's scattering relation per bin, one current unknown per port.

        With a = (v + z0 i)/(2 sqrt z0), b = (v - z0 i)/(2 sqrt z0) at each port (i into the
        port, referred to ground) and b = S a (Pozar, "Microwave Engineering", power waves), row
        p is ``v_p/sqrt(z0_p) - sqrt(z0_p) i_p - sum_q S_pq (v_q + z0_q i_q)/sqrt(z0_q) = 0``;
        finite for opens and shorts alike. S is the file's data at the bin's frequency (the
        trapezoidal image of k f0; Block.s_bins).
        """
        t = c.tokens
        blk = self.blocks[t[-1].upper()]
        ports = t[1:-1]
        S = blk.s_bins(s.imag / (2 * math.pi))
        rz = np.sqrt(np.asarray(blk.z0_ohm, dtype=float))
        for p, node in enumerate(ports if place else ()):
            branch_kcl(node, "0", p0 + p)
        for p, node in enumerate(ports):
            row = p0 + p
            inv, neg = st.term(TERM_CONST, 1.0 / rz[p]), st.term(TERM_CONST, -rz[p])
            if place:
                vdiff(row, node, "0", inv)
                st.put(row, p0 + p, neg)
            for q, other in enumerate(ports):
                sv, si = st.term(TERM_BINS, -S[:, p, q] / rz[q]), st.term(TERM_BINS, -S[:, p, q] * rz[q])
                if place:
                    vdiff(row, other, "0", sv)
                    st.put(row, p0 + q, si)


#: network structures seen, as small numbers (_Net.structure; a number is never given twice)
_STRUCTURES: dict[tuple, int] = {}
_STRUCTURES_MAX = 64
_STRUCTURE_NUMBERS = itertools.count(1)


def _solve_bins(net: _Net, s: np.ndarray, theta: np.ndarray, period_s: float, M: int, t0_s: float,
                cols: list[int]) -> np.ndarray:
    """X (K, n, 1 + len(cols)): the network's response per bin to its own sources (column 0) and
    to one unit of current drawn from each node in ``cols``, in the full MNA unknowns.

    Bin 0 (DC, s = 0: an inductor is a short) is solved with the inductors' branch unknowns; the
    other bins with the inductors folded into admittances 1/(sL) and their currents recovered as
    (v_a - v_b)/(sL): the same solution with fewer unknowns (a loss ladder adds one inductor per
    section; the batched dense solve costs n^3 per bin), condensed (netgen.periodic.condense).
    """
    nn, n = len(net.nodes), net.size

    def rhs(b: np.ndarray) -> np.ndarray:
        draw = np.zeros(b.shape + (len(cols),), complex)
        for j, col in enumerate(cols):
            draw[:, col, j] = -1.0  # one unit of current drawn from dsw (from each port) by the device
        return np.concatenate([b[..., None], draw], axis=-1)

    X = np.zeros((len(s), n, 1 + len(cols)), complex)
    folded = net.folded_columns()
    try:
        Y0, b0 = net.assemble(s[:1], theta[:1], period_s, M, t0_s)  # one bin: dense
        R0 = rhs(b0)
        if not (Y0.imag.any() or R0.imag.any()):  # DC of a network of R, L, C, lines: real (half the work)
            X[:1] = np.linalg.solve(Y0.real, R0.real)
        else:
            X[:1] = np.linalg.solve(Y0, R0)
        if len(s) > 1:
            Yr, br = net.assemble_entries(s[1:], theta[1:], period_s, M, t0_s, first_bin=1, fold_inductors=True)
            vsrc = [(folded[c.name], net.node(c.tokens[1].lower()), net.node(c.tokens[2].lower()))
                    for c in net.cards if c.name[0] == "V"]
            Xr = solve_condensed(Yr, rhs(br), nn, vsrc)
    except np.linalg.LinAlgError:
        raise Unsupported("the network's nodal matrix is singular (a floating node or a loop of sources)") from None
    if len(s) > 1:
        X[1:, :nn] = Xr[:, :nn]
        ind_full, ind_a, ind_b, ind_l = [], [], [], []
        for c in net.cards:
            if c.name not in net.branches:
                continue
            full = nn + net.branches[c.name]
            if c.name[0] == "L":
                ia, ib = (net.node(x.lower()) for x in c.tokens[1:3])
                ind_full.append(full)
                ind_a.append(nn if ia is None else ia)  # column nn of the padded voltages: ground
                ind_b.append(nn if ib is None else ib)
                ind_l.append(net.value(c))
            else:
                w = net.widths.get(c.name, 1)
                X[1:, full:full + w] = Xr[:, folded[c.name]:folded[c.name] + w]
        if ind_full:  # every inductor's current, (v_a - v_b)/(sL), in one step
            v = np.concatenate([Xr[:, :nn], np.zeros((len(s) - 1, 1, Xr.shape[2]), complex)], axis=1)
            X[1:, ind_full] = (v[:, ind_a] - v[:, ind_b]) / (s[1:, None, None] * np.asarray(ind_l)[None, :, None])
    return X


def _network(cards: list[Card], device: str | set[str], period_s: float, blocks: dict | None = None, *,
             exclude: frozenset = frozenset(), roots: tuple = ("dsw",)) -> tuple[_Net, set[str]]:
    """The linear elements connected (through other linear elements) to ``dsw`` (and to the
    other ``roots``); ``device``: the device's element name(s), left out, as are the elements
    named in ``exclude``.

    Length: reachability from the roots and then one check and branch numbering per element kind,
    in the order ``_Net.assemble`` stamps them.
    """
    device = {device} if isinstance(device, str) else set(device)
    elements = [c for c in cards if not c.text.startswith(".") and c.name not in exclude]
    adj: dict[str, set[str]] = {}

    def terminals(c: Card) -> list[str]:
        t = c.tokens
        kind = c.name[0]
        t = t[1:5] if kind in "TEG" else t[1:-1] if kind == "X" else t[1:3]
        return [x.lower() for x in t]

    linear = [(c, [x for x in terminals(c) if x not in GROUND]) for c in elements if c.name not in device]
    for _, ns in linear:
        for x in ns:
            adj.setdefault(x, set()).update(ns)
    seen: set[str] = set()
    stack = [x for x in roots if x not in GROUND]
    while stack:
        x = stack.pop()
        if x in seen:
            continue
        seen.add(x)
        stack.extend(adj.get(x, ()))
    mine = [c for c, ns in linear if any(x in seen for x in ns)]
    branches: dict[str, int] = {}
    widths: dict[str, int] = {}
    sources: dict[str, SourceWaveform] = {}
    blocks = {k.upper(): v for k, v in (blocks or {}).items()}
    nb = 0
    for c in mine:
        kind = c.name[0]
        if kind == "X":
            blk = blocks.get(c.tokens[-1].upper())
            if blk is None:
                raise Unsupported(f"{c.tokens[0]}: subcircuit '{c.tokens[-1]}' in the output network")
            if len(c.tokens) - 2 != blk.nports:
                raise Unsupported(f"{c.tokens[0]}: {len(c.tokens) - 2} nodes for a {blk.nports}-port block")
            branches[c.name] = nb
            widths[c.name] = blk.nports
            nb += blk.nports
            continue
        if kind not in LINEAR_KINDS:
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
            widths[c.name] = 2
            nb += 2
    return _Net(mine, sorted(seen), branches, sources, widths, blocks), seen


@dataclass(frozen=True)
class _Collection:
    """What the periodic state takes from a network besides its node voltages (see _collection)."""

    series: tuple  # (series key, column) of every branch current, in card order
    dc: tuple  # (dc key, column) of the one-branch elements' currents
    lines: tuple  # (card position, element, nodes) of every line
    elements: dict  # element -> (kind, nodes) of every L, C and T
    blocks: tuple  # (element, subcircuit, port nodes) of every Touchstone block


#: collections by network structure (a sweep's points share one)
_COLLECTIONS: dict = {}
_COLLECTIONS_MAX = 32


def _collection(net: _Net) -> _Collection:
    """Which unknowns become which series of the periodic state, and the network's elements: the
    same for every network of one structure, so worked out once for it."""
    key = net.structure
    got = _COLLECTIONS.get(key)
    if got is not None:
        return got
    nn = len(net.nodes)
    series, dc, lines, elements, blocks = [], [], [], {}, []
    for pos, c in enumerate(net.cards):
        kind = c.name[0]
        if kind not in "LCT" and c.name not in net.branches:
            continue  # a resistor or a source without a branch: nothing to collect
        toks = [x.lower() for x in c.tokens]
        if c.name in net.branches:
            col = nn + net.branches[c.name]
            if kind == "X":
                blocks.append((c.tokens[0], c.tokens[-1].upper(), tuple(toks[1:-1])))
                series += [(f"{toks[0]}#p{q + 1}", col + q) for q in range(net.widths[c.name])]
            elif kind == "T":
                series += [(f"{toks[0]}#1", col), (f"{toks[0]}#2", col + 1)]
                lines.append((pos, c.tokens[0], tuple(toks[1:5])))
            else:
                series.append((f"{toks[0]}#branch", col))
                dc.append((f"{toks[0]}#branch", col))
        if kind in "LCT":
            elements[c.tokens[0]] = (kind, tuple(toks[1:5] if kind == "T" else toks[1:3]))
    return remember(_COLLECTIONS, key, _Collection(tuple(series), tuple(dc), tuple(lines), elements, tuple(blocks)),
                    _COLLECTIONS_MAX)


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
    blocks : dict of element -> (Block, port nodes)
        The Touchstone block instances of the network.
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
    #: Touchstone block instances: element -> (Block, port nodes); their port currents are
    #: ``<element>#p1``, ``#p2`` in ``series`` (A, into the port)
    blocks: dict = field(default_factory=dict, repr=False)
    #: the nodes of a device solved by periodic collocation (netgen.periodic.collocation): their
    #: voltages at t = 0 start the run (``.ic``), V
    ports: tuple = ()

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


#: devices read last (netgen.periodic.device.read_device), by the text of every card it may read
_DEVICES: dict[tuple, object] = {}
_DEVICES_MAX = 16


def _device(cards: list[Card], models: dict, period_s: float, points: int):
    """:func:`read_device`, once per device: the key is the text of every card but the passive
    parts and lines (which read_device does not read; they are what a tolerance or a tuning step
    changes), the period and the grid. The Device is not changed after it is read."""
    key = (tuple(c.text for c in cards if c.name[0] not in "RLCT" or c.text.startswith(".")), period_s, points)
    dev = _DEVICES.get(key)
    return dev if dev is not None else remember(_DEVICES, key, read_device(cards, models, period_s, points),
                                                 _DEVICES_MAX)


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


def estimate(netlist: str, f0_hz: float, points: int, *, cap: bool = True, blocks: dict | None = None) -> PeriodicState:
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
    blocks : dict, optional
        Touchstone blocks by subcircuit name (:class:`netgen.netlist.touchstone.Block`): an ``X``
        card naming one is stamped from the file's S-parameters per bin (docs/touchstone_blocks.md).

    Returns
    -------
    PeriodicState

    Raises
    ------
    Unsupported
        Something in the netlist is outside what the direct solution models.

    """
    with collocation.blas_single_thread():
        return _estimate(netlist, f0_hz, points, cap=cap, blocks=blocks)


def _estimate(netlist: str, f0_hz: float, points: int, *, cap: bool, blocks: dict | None) -> PeriodicState:
    """:func:`estimate` (BLAS on one thread around it).

    Length: the method's steps in the order of the module docstring (read the cards, build the
    network, solve the device, superpose, collect the state); split further they would pass a
    dozen arrays between functions that have no meaning alone.
    """
    period = 1.0 / f0_hz
    cards = read_cards(netlist)
    models = model_cards(cards)
    M = grid_points(points) if cap else max(int(points) + int(points) % 2, 8)
    ports: list[str] = []
    if collocation.has_multinode_device(cards):
        # a device of several nonlinear elements with charges: periodic collocation (collocation.py)
        nonlin = collocation.read_elements(cards, models)
        ports = collocation.port_list(nonlin)
        if cap:
            M = grid_points(points, nonlinear=True)
            M = min(M, collocation.MAX_UNKNOWNS // max(len(ports), 1) // 2 * 2)
        dev_name, t0_s = next((e.name for e in nonlin if e.kind == "B"), nonlin[0].name), 0.0
        net, _ = _network(cards, "", period, blocks, exclude=frozenset(e.name.upper() for e in nonlin),
                          roots=("dsw", *ports))
    else:
        dev = _device(cards, models, period, M)
        if cap and not dev.linear and M > GRID_MAX_NONLINEAR:
            M = grid_points(points, nonlinear=True)
            dev = _device(cards, models, period, M)
        dev_name, t0_s = dev.name, dev.t0_s
        net, _ = _network(cards, {dev.name.upper(), *(x.upper() for x in dev.extra)}, period, blocks)
    h = period / M
    if "dsw" not in net.index:
        raise Unsupported("the device node 'dsw' is not connected to the network")
    K = M // 2 + 1
    k = np.arange(K)
    theta = 2 * np.pi * k / M
    # the simulator's integration per bin: trapezoidal, s_k = (2/h) j tan(theta/2) (the Nyquist bin,
    # C short and L open, capped), or ngspice's damped form when the netlist sets xmu
    s = collocation.s_bins(theta, h, collocation.xmu_of(cards))
    idsw = net.index["dsw"]
    cols = [idsw] + [net.index[p] for p in ports]
    X = _solve_bins(net, s, theta, period, M, t0_s, cols)
    x_src, x_draw = X[..., 0], X[..., 1]
    if ports:
        pid = cols[1:]
        inj = collocation.solve_ports(nonlin, ports, x_src[:, pid], X[:, pid, 2:], s, M)
        x_all = np.fft.irfft(x_src + np.einsum("knp,pk->kn", X[..., 2:], np.fft.rfft(inj, axis=1)), M, axis=0)
        i_dev = x_all[:, len(net.nodes) + net.branches["VISW"]] if "VISW" in net.branches else np.zeros(M)
    else:
        i_dev = solve_device(dev, x_src[:, idsw], x_draw[:, idsw], M)
        spec = np.fft.rfft(i_dev)
        x_all = np.fft.irfft(x_src + x_draw * spec[:, None], M, axis=0)  # (M, n)
    if not np.all(np.isfinite(x_all)):
        raise Unsupported("the periodic solution is not finite")
    nn = len(net.nodes)
    series: dict[str, np.ndarray] = dict(zip(net.nodes, x_all.T[:nn]))
    dc: dict[str, tuple[float, float]] = dict(zip(net.nodes, zip((x_src[0, :nn].real / M).tolist(),
                                                                x_draw[0, :nn].real.tolist())))
    collect = _collection(net)
    for key, col in collect.series:
        series[key] = x_all[:, col]
    for key, col in collect.dc:
        dc[key] = (float(x_src[0, col].real) / M, float(x_draw[0, col].real))
    lines = {name: (*net.line(net.cards[pos]), nodes) for pos, name, nodes in collect.lines}
    elements = dict(collect.elements)
    inst = {name: (net.blocks[subckt], nodes) for name, subckt, nodes in collect.blocks}
    for e in nonlin if ports else ():
        if e.kind == "D" and e.charge is not None:  # junction voltage at t = 0 (IC= of the diode)
            elements[e.name] = ("D", (e.a, e.b))
    series["dsw#device"] = i_dev
    peaks = {key: float(series[name].max()) for key, name in (("vd_max_v", "drain"), ("id_max_a", "vidrain#branch"))
             if name in series}
    return PeriodicState(f0_hz=f0_hz, points=M, t0_s=t0_s, series=series, lines=lines,
                         elements=elements, device=dev_name, dc=dc, peaks=peaks,
                         z_port=-x_draw[:PORT_HARMONICS + 1, idsw].copy(), blocks=inst, ports=tuple(ports))
