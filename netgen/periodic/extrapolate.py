"""A faster start where the periodic estimate cannot see the device: extrapolation of the periodic state.

When the device is the user's own SPICE subcircuit (or anything else
:mod:`netgen.periodic.estimator` declines), the tool cannot compute the periodic state from the
netlist's equations, but ngspice can still be asked for the map from one period's start to the
next: the state at t = kT (every top-level node voltage and inductor current) after each cycle of
the transient. Near the periodic orbit that map is a contraction with a few slow modes (the bias
choke and block, high-Q tanks), and the sequence of period-boundary states converges
geometrically. Vector extrapolation finds its limit from a few terms:

**Minimal polynomial extrapolation** (MPE; S. Cabay and L. W. Jackson, SIAM J. Numer. Anal.,
1976; applied to the periodic steady state of nonlinear networks by S. Skelboe, "Computation of
the periodic steady-state response of nonlinear networks by extrapolation methods", IEEE Trans.
Circuits and Systems, 1980; the form below as in A. Sidi, W. F. Ford and D. A. Smith,
"Acceleration of convergence of vector sequences", SIAM J. Numer. Anal., 1986 -- all recalled from
memory). With the differences u_j = x_(j+1) - x_j of states x_0 .. x_(k+1), solve
``[u_0 .. u_(k-1)] c = -u_k`` in least squares, set c_k = 1, gamma = c / sum(c) and
``s = sum_j gamma_j x_j``. For a linear map x_(j+1) = A x_j + b whose minimal polynomial
(with respect to u_0) has degree k -- at most the state dimension n -- s is the fixed point
exactly: n states need n + 2 boundary states (n + 1 differences).

The run then restarts from s (``IC=`` on every inductor and capacitor, ``.ic`` on every node,
:func:`with_boundary_state`, the mechanism of :mod:`netgen.periodic.initial_state` with a
state known only at t = 0), runs a few cycles more, extrapolates again (cycling, as Skelboe
does), and the judge (:mod:`netgen.periodic.settle`) decides on the final run as always. States
inside the subcircuit that no top-level node carries (internal nodes, inductors) are not
extrapolated; they settle on their own after each restart.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from netgen.netlist import GROUND, read_cards

from .initial_state import insert_before_end, replace_cards, set_ic

__all__ = ["mpe", "BoundaryStates", "state_vectors", "with_boundary_state", "EXTRAPOLATE_CYCLES", "ROUNDS", "SKIP_CYCLES"]

#: cycles run per extrapolation round, boundary states skipped after each (re)start (the fast
#: modes of the restart), and rounds at most
EXTRAPOLATE_CYCLES = 8
SKIP_CYCLES = 2
ROUNDS = 3
#: relative change of the extrapolated state below which no further round is run
ROUND_TOL = 2e-4


def mpe(states: np.ndarray, weights: np.ndarray | None = None) -> np.ndarray:
    """Minimal polynomial extrapolation of a vector sequence (see the module docstring).

    Parameters
    ----------
    states : ndarray (k + 2, n)
        Successive states x_0 .. x_(k+1).
    weights : ndarray (n,), optional
        Scale of each component in the least-squares problem (the result of an exactly linear
        sequence does not depend on it).

    Returns
    -------
    ndarray (n,)
        The extrapolated limit.
    """
    x = np.asarray(states, dtype=float)
    if x.shape[0] < 3:
        return x[-1].copy()
    w = np.ones(x.shape[1]) if weights is None else np.asarray(weights, dtype=float)
    u = np.diff(x, axis=0) * w[None, :]  # (k + 1, n)
    a, rhs = u[:-1].T, -u[-1]
    c, *_ = np.linalg.lstsq(a, rhs, rcond=1e-12)
    c = np.append(c, 1.0)
    total = float(c.sum())
    if abs(total) < 1e-12:
        return x[-1].copy()
    gamma = c / total
    return gamma @ x[:-1]


def state_vectors(netlist: str) -> tuple[list[str], list[str]]:
    """(top-level nodes, inductor elements) whose voltages and currents make the state."""
    cards = read_cards(netlist)
    nodes: set[str] = set()
    inductors = []
    for c in cards:
        if c.text.startswith("."):
            continue
        t = [x.lower() for x in c.tokens]
        kind = c.name[0]
        if kind == "X":
            ns = t[1:-1]
        elif kind in "EGST":
            ns = t[1:5]
        elif kind == "M":
            ns = t[1:5]
        else:
            ns = t[1:3]
        nodes.update(x for x in ns if x not in GROUND)
        if kind == "L":
            inductors.append(c.tokens[0])
    return sorted(nodes), inductors


@dataclass
class BoundaryStates:
    """A ``stop_check`` that records the saved vectors at every period boundary t = kT (linear
    interpolation between the simulator's points) and stops after ``cycles`` cycles."""

    period_s: float
    names: tuple
    cycles: int
    states: list = field(default_factory=list)
    _last: tuple | None = None

    def __call__(self, t_end: float, vecs) -> tuple[bool, str]:
        t = np.asarray(vecs["time"], dtype=float)
        ys = np.array([np.asarray(vecs[n], dtype=float) for n in self.names])
        if self._last is not None:
            keep = t > self._last[0][-1]
            t = np.concatenate([self._last[0][-1:], t[keep]])
            ys = np.concatenate([self._last[1][:, -1:], ys[:, keep]], axis=1)
        T = self.period_s
        while len(self.states) <= self.cycles:
            tk = len(self.states) * T
            if t.size == 0 or t[-1] < tk * (1 - 1e-12):
                break
            self.states.append(np.array([np.interp(tk, t, y) for y in ys]))
        self._last = (t, ys)
        done = len(self.states) > self.cycles
        return done, f"extrapolation: {len(self.states) - 1} cycles recorded" if done else ""


def with_boundary_state(netlist: str, nodes: list[str], inductors: list[str], state: np.ndarray) -> str:
    """The transient netlist started on ``state`` (node voltages, V, then inductor currents, A,
    in the order of :func:`state_vectors`): ``IC=`` on every inductor and on every capacitor
    (its nodes' difference), ``.ic`` on every node, ``uic`` on ``.tran``."""
    v = dict(zip(nodes, state[:len(nodes)]))
    i = dict(zip((x.upper() for x in inductors), state[len(nodes):]))
    cards = read_cards(netlist)
    lines = netlist.splitlines()
    replace: dict[int, tuple[int, str]] = {}

    for c in cards:
        if c.text.lower().startswith(".tran"):
            if not re.search(r"\buic\b", c.text, re.IGNORECASE):
                replace[c.start] = (c.stop, c.text + " uic")
        elif c.name[0] == "L" and c.name in i:
            replace[c.start] = (c.stop, set_ic(c.text, f"{i[c.name]:.12g}"))
        elif c.name[0] == "C" and not c.text.startswith("."):
            a, b = (x.lower() for x in c.tokens[1:3])
            replace[c.start] = (c.stop, set_ic(c.text, f"{v.get(a, 0.0) - v.get(b, 0.0):.12g}"))
    out = replace_cards(lines, replace)
    pairs = [f"v({k})={x:.12g}" for k, x in v.items()]
    ic = [".ic " + " ".join(pairs[:6])] + ["+ " + " ".join(pairs[j:j + 6]) for j in range(6, len(pairs), 6)]
    return insert_before_end(out, ic)


def extrapolated_start(start_netlist: str, plain_netlist: str, period_s: float, *, backend: str | None,
                       timeout_s: float, rounds: int = ROUNDS, cycles: int = EXTRAPOLATE_CYCLES,
                       skip: int = SKIP_CYCLES, progress=None) -> tuple[str, int, int]:
    """Cycle the transient and the extrapolation (see the module docstring) from ``start_netlist``.

    Parameters
    ----------
    start_netlist : str
        The transient netlist of the first round (the DC warm start's ``IC=`` values).
    plain_netlist : str
        The same transient netlist without initial conditions; each round's extrapolated state
        is written into it (:func:`with_boundary_state`).
    period_s : float
        The period, s.

    Returns
    -------
    (netlist, cycles_run, rounds_run)
        The transient netlist started on the last extrapolated state, the cycles the rounds
        took, and how many rounds ran (fewer than ``rounds`` once a round moved the state by
        less than ``ROUND_TOL``, or when ngspice could not start from a round's extrapolated
        state: then the start of the round before, which ran).
    """
    from netgen import simulator  # through the package face, as steady calls it
    from netgen.errors import SimulationError

    nodes, inductors = state_vectors(plain_netlist)
    names = tuple(nodes + [f"{name.lower()}#branch" for name in inductors])
    netlist, used, ran = start_netlist, 0, start_netlist
    for r in range(rounds):
        check = BoundaryStates(period_s=period_s, names=names, cycles=cycles)
        try:
            res = simulator.run_transient(netlist, save=list(names), backend=backend, timeout_s=timeout_s,
                                          stop_check=check, chunk_s=(cycles + 1e-6) * period_s, keep_s=period_s)
        except SimulationError as exc:
            # an extrapolated state the simulator cannot start from (a junction thrown far into
            # forward bias: the time step collapses at once): the last start that ran is kept.
            # The first round's start, a time limit and a simulator crash are the caller's.
            if r == 0 or type(exc) is not SimulationError or "time limit" in str(exc):
                raise
            if progress:
                progress(f"extrapolation round {r + 1}: ngspice could not start from the extrapolated "
                         "state; the previous start is kept")
            return ran, used, r
        ran = netlist
        x = np.array(res.checker.states)
        used += len(x) - 1
        if len(x) < skip + 3:
            return netlist, used, r
        w = 1.0 / np.maximum(np.abs(x).max(axis=0), 1e-9)
        xs = mpe(x[skip:], w)
        if not np.all(np.isfinite(xs)):
            return netlist, used, r
        netlist = with_boundary_state(plain_netlist, nodes, inductors, xs)
        change = float(np.abs((xs - x[-1]) * w).max())
        if progress:
            progress(f"extrapolation round {r + 1}: state moved by {change:.2g} (relative)")
        if change < ROUND_TOL:
            return netlist, used, r + 1
    return netlist, used, rounds
