"""Starting a transient run on a computed periodic state (the estimate of netgen.periodic.estimator).

:func:`with_initial_state` writes ``IC=`` on every inductor, capacitor and transmission line of
the network and adds the sources that give each line its periodic history (see
:func:`history_sources`), plus ``uic`` on the ``.tran`` card. After one line delay those sources
are zero and the circuit is the one the user rendered; ngspice then integrates it from a state
that is already (nearly) periodic.
"""

from __future__ import annotations

import math
import re

import numpy as np

from netgen.netlist import GROUND, read_cards

from .estimator import PeriodicState

__all__ = ["with_initial_state", "initial_conditions", "history_sources", "history_release", "simplify_polyline",
           "smooth_nyquist", "HISTORY_PREFIX"]

#: node and element names given to the line-history sources (:func:`with_initial_state`)
HISTORY_PREFIX = "hist_"
#: largest deviation of a simplified history waveform from the estimate, as a fraction of the
#: wave's peak-to-peak value (simplify_polyline)
HISTORY_TOL = 1e-4
#: PWL points per netlist line (continuation lines keep every line short)
PWL_PAIRS_PER_LINE = 6


def smooth_nyquist(x: np.ndarray) -> np.ndarray:
    """The periodic series filtered with the 5-tap kernel (-1, 4, 10, 4, -1)/16.

    Its response, (10 + 8 cos theta - 2 cos 2 theta)/16 = 1 - theta^4/16 + ..., is zero at the
    Nyquist frequency and flat to fourth order below it (below 1e-6 up to 5 f0 on 512 points).
    The trapezoidal rule leaves an undamped alternating (Nyquist) ringing after each switching
    edge, an artefact of the grid; written into a line's history it would be a sawtooth whose
    every corner ngspice's line echoes one delay later (the first cycles then took twice the
    time points). Near a kink the filter moves samples by a fraction of the slope change times
    the step, so it is applied to the line histories only, not to the initial conditions.
    """
    return (10.0 * x + 4.0 * (np.roll(x, 1) + np.roll(x, -1)) - (np.roll(x, 2) + np.roll(x, -2))) / 16.0


def _fmt(x: float) -> str:
    return f"{float(x):.12g}"


def initial_conditions(state: PeriodicState) -> dict[str, float]:
    """Element -> value at t = 0: inductor current (A), capacitor voltage (V, first node minus second)."""
    ic = {}
    for name, (kind, nodes) in state.elements.items():
        if kind == "L":
            ic[name] = float(state.at(f"{name.lower()}#branch", 0.0))
        elif kind in "CD":  # a capacitor, or a junction diode's voltage (its charge's state)
            a, b = nodes
            va = 0.0 if a in GROUND else float(state.at(a, 0.0))
            vb = 0.0 if b in GROUND else float(state.at(b, 0.0))
            ic[name] = va - vb
    return ic


def set_ic(text: str, value: str) -> str:
    """The element card ``text`` with ``IC=value`` (replacing an IC= it has)."""
    if re.search(r"\bic\s*=", text, re.IGNORECASE):
        return re.sub(r"\bic\s*=\s*\S+", f"IC={value}", text, flags=re.IGNORECASE)
    return f"{text} IC={value}"


def replace_cards(lines: list[str], replace: dict[int, tuple[int, str]]) -> list[str]:
    """The netlist lines with each card starting at line ``k`` of ``replace`` (its lines up to
    ``stop``, continuations included) replaced by the one line ``text``: ``{k: (stop, text)}``."""
    out: list[str] = []
    n = 0
    while n < len(lines):
        if n in replace:
            stop, text = replace[n]
            out.append(text)
            n = stop
            continue
        out.append(lines[n])
        n += 1
    return out


def insert_before_end(lines: list[str], extra: list[str]) -> str:
    """The netlist text with ``extra`` lines placed before its ``.end`` card (at the end if none)."""
    end = max((i for i, ln in enumerate(lines) if re.fullmatch(r"\.end\b.*", ln.strip().lower())
               and not re.match(r"\.end[a-z]", ln.strip().lower())), default=len(lines))
    return "\n".join(lines[:end] + extra + lines[end:]) + "\n"


def simplify_polyline(t: np.ndarray, y: np.ndarray, tol: float) -> np.ndarray:
    """Indices of the points to keep so that linear interpolation between them stays within
    ``tol`` of every dropped point (Ramer-Douglas-Peucker, on the values only; end points kept).

    Each PWL corner is a simulator breakpoint, and a transmission line echoes large slope
    changes one delay later; fewer corners keep the first cycles as cheap as the later ones.
    """
    keep = np.zeros(len(t), bool)
    keep[0] = keep[-1] = True
    stack = [(0, len(t) - 1)]
    while stack:
        a, b = stack.pop()
        if b - a < 2:
            continue
        seg = slice(a + 1, b)
        line = y[a] + (y[b] - y[a]) * (t[seg] - t[a]) / (t[b] - t[a])
        err = np.abs(y[seg] - line)
        k = int(np.argmax(err))
        if err[k] > tol:
            m = a + 1 + k
            keep[m] = True
            stack += [(a, m), (m, b)]
    return np.nonzero(keep)[0]


def _pwl_source(name: str, a: str, b: str, times, values) -> list[str]:
    """An independent ``V``/``I`` source card ``name a b PWL(t v ...)`` in continuation lines."""
    pairs = [f"{_fmt(t)} {_fmt(v)}" for t, v in zip(times, values)]
    out = [f"{name} {a} {b} PWL("]
    for k in range(0, len(pairs), PWL_PAIRS_PER_LINE):
        out.append("+ " + " ".join(pairs[k:k + PWL_PAIRS_PER_LINE]))
    out.append("+ )")
    return out


def _history_source_names(line: str, port: int) -> tuple[str, str]:
    """The voltage and current source that give port ``port`` of line ``line`` its history."""
    low = line.lower()
    return f"V{HISTORY_PREFIX}{low}_{port}", f"I{HISTORY_PREFIX}{low}_{port}"


def history_sources(state: PeriodicState, name: str) -> tuple[tuple, list[str]]:
    """The rewired card of line ``name`` and the sources that give it its periodic history.

    A lossless line started with ``IC=v1,i1,v2,i2`` remembers a constant incoming wave
    ``c = v + Z0 i`` of the far port for the first TD (ngspice's TRA model). A voltage source
    ``Vh`` in series with each port and a current source ``Vh/Z0`` into the port leave the wave
    the port launches unchanged and add ``2 Vh`` to the wave it receives; with
    ``Vh(t) = (w_far(t - TD) - c)/2`` for 0 <= t < TD (``w_far`` the far port's periodic launched
    wave) and 0 afterwards, the line behaves from t = 0 as if it had always carried the periodic
    waves, and from TD on the sources are zero and the circuit is the original one.

    The sources are SPICE3 ``V``/``I`` sources with PWL waveforms (portable: the hand-off packs
    use the same). Their corners are breakpoints; after the Nyquist filter (smooth_nyquist) and
    the simplification (simplify_polyline) they cost no more time points than a plain run
    (measured on sims/demo.toml: 10 cycles, 14315 points against 14342 cold; ngspice
    behavioural ``pwl()`` sources, which set no breakpoints, took 15062 and 10 % longer).

    Returns
    -------
    ((port-1 node, port-2 node, IC values), extra_lines)
    """
    z0, td, (n1, n2, n3, n4) = state.lines[name]
    low = name.lower()
    v1 = state.voltage(n1) - state.voltage(n2)
    v2 = state.voltage(n3) - state.voltage(n4)
    i1, i2 = state.series[f"{low}#1"], state.series[f"{low}#2"]
    T, M = state.period_s, state.points
    h = T / M
    wave = {1: smooth_nyquist(v1 + z0 * i1), 2: smooth_nyquist(v2 + z0 * i2)}
    period_grid = np.arange(M + 1) * h

    def at(x, t):
        return np.interp(np.mod(np.asarray(t) - state.t0_s, T), period_grid, np.append(x, x[0]))

    ic = [at(v1, 0.0), at(i1, 0.0), at(v2, 0.0), at(i2, 0.0)]
    c_in = {1: ic[2] + z0 * ic[3], 2: ic[0] + z0 * ic[1]}
    # PWL corners: the grid points shifted by TD that fall in (0, TD), plus both ends
    shifted = state.t0_s + np.arange(M) * h + td
    inner = []
    for k in range(int(math.ceil(td / T)) + 1):
        x = shifted - k * T
        inner.append(x[(x > 1e-6 * h) & (x < td - 1e-6 * h)])
    times = np.concatenate([[0.0], np.sort(np.concatenate(inner)), [td]])
    extra = []
    ports = {1: (n1, n2), 2: (n3, n4)}
    new_nodes = {}
    for port, (a, ref) in ports.items():
        far = 2 if port == 1 else 1
        vh = (at(wave[far], times - td) - c_in[port]) / 2.0
        vh[-1] = 0.0
        span = float(np.ptp(wave[far]))
        keep = simplify_polyline(times, vh, HISTORY_TOL * max(span, 1e-12))
        node = f"{HISTORY_PREFIX}{low}_{port}"
        new_nodes[port] = node
        v_name, i_name = _history_source_names(name, port)
        extra += _pwl_source(v_name, a, node, times[keep], vh[keep])
        extra += _pwl_source(i_name, ref, node, times[keep], vh[keep] / z0)
    return (new_nodes[1], new_nodes[2], [_fmt(x) for x in ic]), extra


def history_release(state: PeriodicState) -> tuple[float, tuple[str, ...]] | None:
    """When and how to retire the line-history sources of :func:`with_initial_state` in a paused run.

    From the longest line delay on, every history source is zero, but ngspice keeps evaluating
    its PWL waveform at every time point: measured on sims/demo.toml, 30 cycles cost 13.8 us per
    time point with the sources against 11.3 us with the same sources as ``DC 0`` (ngspice 39).
    Set to a constant zero (``alter @name[pwl] = [ 0 0 1 0 ]``) once the delays are over, the
    run is the rendered circuit again at its own cost, with the same answer (per-cycle Pdc and P1
    of 12 cycles unchanged to 1e-6 when the stop is at a switching instant).

    Returns
    -------
    (t_s, commands) or None
        The first multiple of half a period after the longest delay (the switch of a 50 % duty
        drive turns there, so the stop adds no time point), s, and the ``alter`` commands for the
        engine's :class:`netgen.simulator.engine.Resume`; None when the network has no lines.
    """
    if not state.lines:
        return None
    td_max = max(td for _, td, _ in state.lines.values())
    half = 0.5 * state.period_s
    t_s = math.ceil(td_max / half * (1 + 1e-9) + 1e-9) * half
    names = [n for name in state.lines for port in (1, 2) for n in _history_source_names(name, port)]
    return t_s, tuple(f"alter @{n.lower()}[pwl] = [ 0 0 1 0 ]" for n in names)


def with_initial_state(netlist: str, state: PeriodicState) -> str:
    """The transient netlist started on the estimated periodic state.

    Every inductor and capacitor of the network gets ``IC=`` (its value at t = 0), every line
    ``IC=v1,i1,v2,i2`` and the history sources of :func:`history_sources`; ``uic`` is added to
    the ``.tran`` card if it lacks it. Elements outside the network (the control and gate
    circuits) are left as they are. Every card added is SPICE3; for the portable dialect run
    :func:`netgen.netlist.portable.portable_cards` on the result to fold long cards.
    """
    lines = netlist.splitlines()
    cards = read_cards(netlist)
    ic = initial_conditions(state)
    extra: list[str] = []
    replace: dict[int, tuple[int, str]] = {}
    by_name = {n.upper(): n for n in state.elements}
    for c in cards:
        key = c.name
        if c.text.lower().startswith(".tran"):
            if not re.search(r"\buic\b", c.text, re.IGNORECASE):
                replace[c.start] = (c.stop, c.text + " uic")
            continue
        if key not in by_name:
            continue
        name = by_name[key]
        kind = state.elements[name][0]
        if kind in "LCD":
            replace[c.start] = (c.stop, set_ic(c.text, _fmt(ic[name])))
        else:
            (p1, p2, ic_vals), more = history_sources(state, name)
            toks = c.text.split()
            toks[1], toks[3] = p1, p2
            text = re.sub(r"\s+ic\s*=\s*\S+", "", " ".join(toks), flags=re.IGNORECASE)
            replace[c.start] = (c.stop, f"{text} IC={','.join(ic_vals)}")
            extra += more
    out = replace_cards(lines, replace)
    if state.blocks:
        from netgen.netlist import BLOCK_SUBCKT

        from .block_state import block_initial_states, with_block_states

        out = with_block_states(out, BLOCK_SUBCKT, block_initial_states(state))
    if state.ports:
        # a device with nonlinear charges: ngspice with uic starts every node at 0 V and takes a
        # junction's charge from its node voltages, not from the diode's IC=; '.ic' sets them
        # (measured: without it the gate started at +4.2 V instead of -4.4 V, and the jolt
        # excited the bias network's choke-block mode for 230 cycles)
        extra.append(".ic " + " ".join(f"v({n})={_fmt(state.at(n, 0.0))}" for n in state.ports))
    return insert_before_end(out, extra)
