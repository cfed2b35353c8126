"""Periodic steady state: a start on the computed periodic orbit, chunked transient, drift-aware convergence.

:func:`simulate` renders the design's transient netlist (``netgen.netlist.renderer``), computes its
periodic steady state directly (:mod:`netgen.periodic.estimator`) and starts ngspice on it
(:mod:`netgen.periodic.initial_state`), runs ngspice in chunks of a few cycles and stops once DC power,
load power, the drain waveform, the harmonic impedances and the switching peaks have settled to
``sim.settle_tol`` -- judged so that slow drift is caught -- or at ``sim.max_cycles`` (then
``settled=False``, with the reason in ``note``). Every reported number comes from ngspice.

Convergence (see docs/simulation.md)
-----------------------------------
Per cycle k the checker computes Pdc_k, Pload_k and the drain waveform's harmonics from the
simulator's own points. Over the last 3w cycles (w = max(2, n // 6) grows with the run)
it forms three window means S1, S2, S3 and their differences d1 = S2 - S1,
d2 = S3 - S2. For a sum of decaying exponentials dominated by the slowest
pole, d2/d1 = q is that pole's decay per window and the change still to come
is d2*q/(1-q) (Aitken's delta-squared extrapolation). The run is settled when,
for Pdc and Pload, that predicted remaining change (or, when the windows do not
decay geometrically, a conservative bound) is below tol relative, and the
window-mean drain waveform changed by less than tol (rms, relative). A slow
drift makes q close to 1 and the prediction large, so consecutive cycles that
agree to 0.1 % do not pass. A run started on the periodic estimate (:class:`Anchor`) may
count changes that the simulator's cycle-to-cycle scatter explains as noise while it stays
within tol of the estimate (:func:`judge`).

Starts
------
(a) ``sim.periodic_start`` (default): the periodic state of the netlist itself, every inductor,
capacitor and line history (:mod:`netgen.periodic.estimator`); ngspice's first cycles are then within about
0.1 % of its own settled values. (b) Where the netlist is outside what that computation models,
or with ``sim.periodic_start = false``: a DC operating point of the passive network
(``render(mode="op")``, the device replaced by a DC sink of the estimated Idc) gives the current
of every inductor and the voltage of every capacitor as ``IC=`` values with ``uic``, and the run
netlist gets zero-valued auxiliary DC sources across the feed inductors and in series with the
DC blocks (:func:`with_aux_sources`); :class:`BiasNulling` sets them at a few cycle boundaries
with ``alter`` so that the slow choke-block states sit at their periodic values, then keeps them
constant (the circuit is then exactly equivalent to the real one: in the periodic state the
sources deliver no average power). (c) ``sim.warm_start = false``: from zero. See
docs/simulation.md.
"""

from __future__ import annotations

import math
import re
from typing import Callable

import numpy as np

from netgen import simulator
from netgen.design import SimSpec, SizedDesign, Waveforms
from netgen.errors import SimulationError
from netgen.netlist import netlist_elements, parse_spice_number

from . import estimator, extrapolate, initial_state
from .bias_nulling import (
    CORRECT_AT,
    AuxSource,
    BiasNulling,
    dc_initial_conditions,
    with_aux_sources,
)
from .pwl_fourier import fourier_pwl
from .settle import (  # noqa: F401  (re-exported for callers and tests)
    ANCHOR_Z_TOL,
    HARMONICS_JUDGED,
    LATE_CHUNK_CYCLES,
    NOISE_FRACTION,
    NOISE_SIGMAS,
    PEAK_TOL,
    Z_CHANGE_TOL,
    Z_CURRENT_FLOOR,
    Z_SCALE_FRACTION,
    Anchor,
    SettleCheck,
    judge,
    settle_hint,
    window_peaks,
)

# the convergence judge (netgen.periodic.settle) and the DC warm start (netgen.periodic.bias_nulling) are
# re-exported: callers and tests reach them as netgen.periodic.steady.*
__all__ = ["simulate", "simulate_netlist", "SettleCheck", "Anchor", "BiasNulling", "AuxSource", "with_aux_sources", "judge",
           "dc_initial_conditions",
           "netlist_elements", "window_peaks", "window_fourier", "window_points", "FOURIER_VECTORS"]

#: cycles per chunk (ngspice stop/resume); small chunks stop sooner, large ones cost less overhead
CHUNK_CYCLES = 5


# ---------------------------------------------------------------- netlist helpers

def _rload(elements: dict) -> float:
    tokens = elements.get("RLOAD")
    if tokens is None or len(tokens) < 4:
        raise SimulationError("The netlist has no 'RLOAD load 0 <R>' line; the load power needs it "
                              "(docs/netlist_conventions.md).")
    value = re.sub(r"^r=", "", tokens[3], flags=re.I)
    return parse_spice_number(value)


# ---------------------------------------------------------------- simulation

def _save_list(elements: dict) -> tuple[list[str], list[str]]:
    nodes = {"drain", "vdd", "load"}
    all_nodes = {t.lower() for toks in elements.values() for t in toks[1:3]}
    if "gate" in all_nodes:
        nodes.add("gate")
    if "gin" in all_nodes:  # the input port of an input network (docs/devices.md)
        nodes.add("gin")
    if "dint" in all_nodes:  # the generator node: the intrinsic plane (docs/netlist_conventions.md)
        nodes.add("dint")
    for key, toks in elements.items():
        # the loss resistors, and every inductor and capacitor (part stress, netgen.results.stress)
        if key.startswith(("RLOSS_", "RLIN_")) or key[:1].upper() in "LC":
            nodes.update(t.lower() for t in toks[1:3] if t not in ("0", "gnd"))
    branches = [f"{s.lower()}#branch" for s in ("VDD", "VIDRAIN", "VISW", "VDRIVE", "VIGATE") if s in elements]
    branches += sorted(f"{k.lower()}#branch" for k in elements if k[:1].upper() == "L")
    return sorted(nodes), branches


def _final_waveforms(vecs, f0_hz: float, ppc: int, nodes: list[str], elements: dict,
                     periods: int) -> tuple:
    T = 1.0 / f0_hz
    t = np.asarray(vecs["time"], dtype=float)
    end = math.floor(t[-1] / T * (1 + 1e-12)) * T
    start = end - 2 * T
    if start < t[0] - 1e-6 * T:
        raise SimulationError("The transient run ended before two full cycles were simulated; "
                              "raise sim.max_cycles.")
    grid = start + np.arange(2 * ppc) * (T / ppc)
    v = {n: np.interp(grid, t, vecs[n]) for n in nodes if n in vecs}
    i = {}
    if "vidrain#branch" in vecs:
        i["drain"] = np.interp(grid, t, vecs["vidrain#branch"])
    if "visw#branch" in vecs:
        i["switch"] = np.interp(grid, t, vecs["visw#branch"])
    if "vdd#branch" in vecs:
        i["supply"] = -np.interp(grid, t, vecs["vdd#branch"])
    if "vdrive#branch" in vecs:
        i["gate"] = i["source"] = -np.interp(grid, t, vecs["vdrive#branch"])
    if "vigate#branch" in vecs:  # behind an input network: the gate's own current (docs/devices.md)
        i["gate"] = np.interp(grid, t, vecs["vigate#branch"])
    for name in elements:  # inductor currents, keyed by element name (first node to second)
        if name[:1].upper() == "L" and f"{name.lower()}#branch" in vecs:
            i[name] = np.interp(grid, t, vecs[f"{name.lower()}#branch"])
    # extremes: the median over the kept periods of each period's extreme (a narrow edge spike
    # whose height depends on where the simulator's points fall differs from period to period;
    # what every period does is the amplifier's)
    k_avail = int(math.floor((end - max(t[0], end - periods * T)) / T * (1 + 1e-9)))
    per = [window_peaks(t, vecs, end - (j + 1) * T, end - j * T) for j in range(max(k_avail, 1))]
    peaks = {key: float(np.median([p[key] for p in per])) for key in per[0]}
    # the range of the per-period maxima: narrow switching spikes scatter from period to period
    for key in ("vd_max_v", "id_max_a"):
        if key in per[0]:
            values = [p[key] for p in per]
            peaks[key.replace("_max_", "_max_lo_")] = float(min(values))
            peaks[key.replace("_max_", "_max_hi_")] = float(max(values))
    return grid - start, v, i, int(round(end / T)), peaks


#: Waveforms.fourier key -> (saved vector, sign): currents follow the Waveforms.i conventions
FOURIER_VECTORS = {
    "drain_v": ("drain", 1.0), "int_v": ("dint", 1.0), "load_v": ("load", 1.0), "vdd_v": ("vdd", 1.0), "gate_v": ("gate", 1.0),
    "drain_i": ("vidrain#branch", 1.0), "switch_i": ("visw#branch", 1.0),
    "supply_i": ("vdd#branch", -1.0), "gate_i": ("vdrive#branch", -1.0),
    "gin_v": ("gin", 1.0), "gate_dev_i": ("vigate#branch", 1.0),
}


def window_fourier(t: np.ndarray, vecs, start_s: float, period_s: float, periods: int,
                   n_max: int) -> dict[str, np.ndarray]:
    """Exact Fourier coefficients c_0..c_nmax over the final window from the simulator's own points.

    Parameters
    ----------
    t : ndarray
        ngspice's time points, s.
    vecs : mapping
        Saved vectors (``drain``, ``load``, ``vidrain#branch``, ``vdd#branch`` ...).
    start_s, period_s : float
        Window start (phase reference) and period, s.
    periods : int
        Window length in periods.
    n_max : int
        Highest harmonic.

    Returns
    -------
    dict
        The keys of :data:`FOURIER_VECTORS` whose vector was saved (``drain_v``, ``drain_i``,
        ``load_v``, ``supply_i`` ...), each :func:`netgen.results.analysis.fourier_pwl` of the vector
        (sign as in ``Waveforms.i``: supply and gate currents positive when delivered).
    """
    keys = [key for key, (name, _sign) in FOURIER_VECTORS.items() if name in vecs]
    if not keys:
        return {}
    rows = np.array([FOURIER_VECTORS[k][1] * np.asarray(vecs[FOURIER_VECTORS[k][0]], dtype=float) for k in keys])
    coeffs = fourier_pwl(t, rows, start_s, period_s, n_max, periods)
    return dict(zip(keys, coeffs))


#: Waveforms.i key -> (saved branch vector, sign)
_CURRENTS = {"drain": ("vidrain#branch", 1.0), "switch": ("visw#branch", 1.0),
             "supply": ("vdd#branch", -1.0), "gate": ("vdrive#branch", -1.0), "source": ("vdrive#branch", -1.0),
             "gate_dev": ("vigate#branch", 1.0)}


def window_points(t: np.ndarray, vecs, nodes: list[str], start_s: float, end_s: float) -> dict:
    """The simulator's own points over [start_s, end_s] (both ends interpolated), for exact integrals.

    Returns ``t_s`` (s, from ``start_s``), ``v:<node>`` for every saved node and ``i:<name>``
    for the currents of :class:`netgen.design.records.Waveforms` (same signs), or ``{}`` when the
    points do not cover the window.
    """
    t = np.asarray(t, dtype=float)
    if t.size < 2 or t[0] > start_s + 1e-4 * (end_s - start_s) or t[-1] < end_s * (1 - 1e-12):
        return {}
    inside = (t > start_s) & (t < end_s)
    tw = np.concatenate(([start_s], t[inside], [end_s]))

    def cut(y) -> np.ndarray:
        y = np.asarray(y, dtype=float)
        return np.concatenate((np.interp([start_s], t, y), y[inside], np.interp([end_s], t, y)))

    out = {"t_s": tw - start_s}
    for n in nodes:
        if n in vecs:
            out[f"v:{n}"] = cut(vecs[n])
    for key, (name, sign) in _CURRENTS.items():
        if name in vecs:
            out[f"i:{key}"] = sign * cut(vecs[name])
    if "i:gate_dev" in out:  # behind an input network "gate" is the gate's own current
        out["i:gate"] = out.pop("i:gate_dev")
    return out


def simulate_netlist(make_tran: Callable[[dict | None, float], str], *, f0_hz: float, vdd_v: float,
                     sim: SimSpec | None = None, make_op: Callable[[float], str] | None = None,
                     idc_est_a: float | None = None, progress: Callable[[str], None] | None = None,
                     backend: str | None = None, feeds=(), blocks=(), touchstone: dict | None = None) -> Waveforms:
    """Run a transient netlist to periodic steady state.

    Parameters
    ----------
    make_tran : callable (ic, tstop_s) -> str
        Returns the ngspice transient netlist with the given initial conditions
        (element name -> A or V; None for none) and stop time, s.
    f0_hz, vdd_v : float
        Fundamental, Hz; supply voltage, V (Pdc = vdd_v * mean supply current).
    sim : SimSpec
        ``settle_tol``, ``min_cycles``, ``max_cycles``, ``timeout_s``, ``points_per_cycle``,
        ``average_periods``, ``warm_start``, ``periodic_start``, ``backend``.
    make_op : callable (idc_a) -> str, optional
        The DC operating-point netlist of the passive network with the drain sinking
        ``idc_a``; needed for the DC warm start (used where the periodic start is not).
    idc_est_a : float, optional
        Expected DC current, A (the first warm start).
    feeds, blocks : sequence of str, optional
        Element names of the DC-feed inductors and DC-block capacitors (``L_feed``,
        ``C_block``). With the warm start, auxiliary sources there null the slow bias mode
        (:func:`with_aux_sources`, :class:`BiasNulling`); without them the run is plain.
    touchstone : dict, optional
        Touchstone blocks of the netlist by subcircuit name, for the periodic estimate
        (:func:`netgen.periodic.estimator.estimate`, ``blocks``).

    Returns
    -------
    Waveforms
        Two periods on a uniform grid, ``settled``, ``cycles`` (all attempts), ``history``.

    Length: the run in its order (periodic estimate or DC start, the chunked ngspice run with
    the judge, the harmonic table of the kept periods, the outcome record); each step is a call,
    the body is the sequence.
    """
    sim = sim or SimSpec()
    backend = backend or sim.backend
    T = 1.0 / f0_hz
    tstop = sim.max_cycles * T
    probe = make_tran(None, tstop)
    elements = netlist_elements(probe)
    rload = _rload(elements)
    nodes, branches = _save_list(elements)
    save = nodes + branches
    state, why_not = None, ""
    if sim.warm_start and sim.periodic_start:
        try:
            state = estimator.estimate(probe, f0_hz, sim.points_per_cycle, blocks=touchstone)
        except estimator.Unsupported as exc:
            why_not = str(exc)
    warm = bool(sim.warm_start and (state is not None or make_op is not None and idc_est_a is not None))
    sources: list[AuxSource] = []
    extrapolated = None
    if state is not None:
        # started on the periodic orbit: judged from the first cycle, stopped every 2 cycles
        netlist = initial_state.with_initial_state(probe, state)
        least = max(sim.min_cycles, sim.average_periods)
        anchor = Anchor(pdc_w=-vdd_v * state.mean("vdd#branch"), pload_w=state.mean_square("load") / rload,
                        z=state.impedances(HARMONICS_JUDGED))
        check = SettleCheck(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                            min_cycles=least, step_cycles=LATE_CHUNK_CYCLES, anchor=anchor)
        chunk = (max(least, 6) + 1e-6) * T
        release = initial_state.history_release(state)
        if release is not None and release[0] < chunk - T:
            # stop once after the longest line delay, set the history sources to zero, go on
            check.release = simulator.Resume(release[1], chunk)
            chunk = release[0]
    elif warm and sim.periodic_start and make_op is not None and idc_est_a is not None \
            and not touchstone and not any(k.startswith("T") for k in elements):
        # the device is outside the estimate (a SPICE subcircuit ...): extrapolate the periodic state
        # from ngspice's own period-boundary states (netgen.periodic.extrapolate), then judge as usual
        op_netlist = make_op(idc_est_a)
        op = simulator.run_op(op_netlist, backend=backend, timeout_s=sim.timeout_s)
        ic = dc_initial_conditions(op_netlist, probe, op=op)
        netlist, ext_cycles, ext_rounds = extrapolate.extrapolated_start(
            make_tran(ic, tstop), make_tran(None, tstop), T, backend=backend, timeout_s=sim.timeout_s,
            progress=progress)
        extrapolated = (ext_cycles, ext_rounds)
        check = SettleCheck(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                            min_cycles=max(sim.min_cycles, sim.average_periods), step_cycles=LATE_CHUNK_CYCLES)
        chunk = (max(sim.min_cycles, sim.average_periods, 6) + 1e-6) * T
    else:
        ic = None
        if warm:
            op_netlist = make_op(idc_est_a)
            op = simulator.run_op(op_netlist, backend=backend, timeout_s=sim.timeout_s)
            ic = dc_initial_conditions(op_netlist, probe, op=op)
        netlist = make_tran(ic, tstop)
        if warm and (feeds or blocks):
            idc_b = 0.5 * idc_est_a if idc_est_a else 0.1
            op_b = simulator.run_op(make_op(idc_b), backend=backend, timeout_s=sim.timeout_s)
            netlist, sources = with_aux_sources(netlist, feeds, blocks, op, op_b, idc_est_a, idc_b)
        if sources:
            extra = tuple(sorted({s_.vector for s_ in sources}))
            save = save + [v for v in extra if v not in save]
            check = BiasNulling(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                                min_cycles=max(sim.min_cycles, sim.average_periods), extra=extra, sources=sources,
                                scale_idc=any(k.startswith("S") for k in elements),)
            chunk = (CORRECT_AT[0] + 1e-6) * T
        else:
            check = SettleCheck(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                                min_cycles=max(sim.min_cycles, sim.average_periods))
            chunk = CHUNK_CYCLES * T
    vecs = simulator.run_transient(netlist, save=save, backend=backend, timeout_s=sim.timeout_s,
                                stop_check=check, chunk_s=chunk, progress=progress,
                                keep_s=(sim.average_periods + 1) * T)
    check = vecs.checker
    t_s, v, i, end_cycles, peaks = _final_waveforms(vecs, f0_hz, sim.points_per_cycle, nodes, elements,
                                                    sim.average_periods)
    # the harmonic table averages sim.average_periods settled periods (fewer when the run is short)
    t_all = np.asarray(vecs["time"], dtype=float)
    k_avail = int(math.floor((end_cycles * T - t_all[0]) / T * (1 + 1e-9)))
    k_f = max(2, min(sim.average_periods, k_avail - k_avail % 2))
    coeffs = window_fourier(t_all, vecs, (end_cycles - k_f) * T, T, k_f, int(sim.harmonics))
    points = window_points(t_all, vecs, nodes, (end_cycles - k_f) * T, end_cycles * T)
    settled = bool(check.settled)
    if extrapolated is not None:
        start = {"method": "extrapolated", "reason": why_not, "cycles": extrapolated[0], "rounds": extrapolated[1]}
    elif state is not None:
        vl = state.series["load"]
        start = {"method": "periodic", "reason": "",
                 "pdc_w": -vdd_v * state.mean("vdd#branch"),
                 "pout_w": float((2.0 * abs(np.fft.rfft(vl)[1]) / len(vl)) ** 2 / (2.0 * rload)),
                 "pload_w": state.mean_square("load") / rload, **state.peaks}
    else:
        start = {"method": "dc" if warm else "cold", "reason": why_not}
    if extrapolated is not None:
        how = (f" (started on a periodic state extrapolated from {extrapolated[0]} cycles in {extrapolated[1]} "
               f"rounds; no periodic estimate: {why_not})")
    elif state is not None:
        how = " (started on the periodic estimate)"
    elif sources:
        how = " (warm start, bias mode nulled" + (f"; no periodic estimate: {why_not})" if why_not else ")")
    elif warm:
        how = " (warm start" + (f"; no periodic estimate: {why_not})" if why_not else ")")
    else:
        how = " (cold start)"
    if settled:
        note = check.reason + how
    else:
        hint = settle_hint(check.reason, settle_tol=sim.settle_tol, max_cycles=sim.max_cycles, warm=warm,
                           periodic=state is not None, bias_nulled=bool(sources))
        note = f"not settled within sim.max_cycles = {sim.max_cycles}{how}; {check.reason}. {hint}"
    ran = len(check.pdc_w) + (extrapolated[0] if extrapolated else 0)  # the extrapolation rounds count
    return Waveforms(f0_hz=f0_hz, t_s=t_s, v=v, i=i, settled=settled, cycles=ran,
                     history={"pdc_w": np.array(check.pdc_w), "pload_w": np.array(check.pload_w)},
                     note=note, peaks=peaks, fourier=coeffs, start=start, points=points)


def simulate(sized: SizedDesign, *, progress: Callable[[str], None] | None = None,
             backend: str | None = None) -> Waveforms:
    """Simulate a sized design to periodic steady state (see the module docstring).

    Uses ``netgen.netlist.renderer.render(sized, mode="tran", ic=..., tstop_s=...)`` and, for the
    warm start, ``render(sized, mode="op", idc_a=...)``.
    """
    from netgen.netlist import BLOCK_SUBCKT, design_block, render  # imported late so the simulator works alone

    design = sized.design
    block = design_block(design)

    def make_tran(ic, tstop_s):
        return render(sized, mode="tran", ic=ic, tstop_s=tstop_s)

    def make_op(idc_a):
        return render(sized, mode="op", idc_a=idc_a)

    from netgen.synthesis import element_name

    def names(role: str) -> list[str]:
        return [element_name(c.name) for c in sized.components.values() if c.role == role]

    return simulate_netlist(make_tran, f0_hz=design.f0_hz, vdd_v=design.vdd_v, sim=design.sim,
                            make_op=make_op, idc_est_a=sized.idc_est_a, progress=progress,
                            backend=backend, feeds=names("feed"), blocks=names("block"),
                            touchstone={BLOCK_SUBCKT: block} if block is not None else None)
