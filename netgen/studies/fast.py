"""The fast evaluation path: metrics from the periodic estimate alone, and their confirmation in ngspice.

:func:`netgen.periodic.estimate` computes the periodic steady state of the transient netlist
directly (one linear solve per frequency bin and one for the device; no time stepping). This
module turns that :class:`netgen.periodic.PeriodicState` into :class:`netgen.design.Waveforms`
and the same metrics contract (:func:`netgen.results.analyse`), marked ``"engine": "estimate"``
(a normal run says ``"engine": "ngspice"``). Where the estimate does not apply (``Unsupported``:
a SPICE subcircuit device, an element it does not model) the point runs in ngspice and its
metrics say why (``engine_note``).

Studies confirm a sample of the points in ngspice (:func:`confirm_points`): the relative
difference of Pout and drain efficiency is reported, and a point disagreeing by more than
:data:`CONFIRM_TOL` is flagged and its stored metrics replaced by ngspice's.

The estimate is the trapezoidal rule on a uniform grid of M points a period, the integration
ngspice is asked for (docs/simulation.md); on the demo it agrees with a settled ngspice run
within 0.05 % in Pdc and Pout (docs/benchmarks.md), on a grid of :data:`FAST_POINTS` as on
the simulator's own 1000 points (within 0.02 % of each other; docs/closure.md).
"""

from __future__ import annotations

import math
import re
import time

import numpy as np

from netgen.design import Waveforms

__all__ = [
    "CONFIRM_TOL",
    "ESTIMATE_BALANCE_MAX",
    "FAST_POINTS",
    "confirm_points",
    "confirm_sample",
    "disagreement",
    "estimate_waveforms",
    "evaluate_estimate",
    "evaluate_fast",
    "evaluate_ngspice",
    "fallback_reason",
    "ngspice_turn_on",
    "summarize_confirmation",
    "turn_on_state",
]

#: largest grid (points a period) of the fast path; the simulator's points_per_cycle when smaller.
#: Against settled ngspice runs (docs/closure.md, "The grid"): Pout and drain efficiency within
#: 0.03 % on the demo's tolerance points and 0.07 % on every shipped design, as on 500 or 1000
#: points (what is left is not the grid's); 256 points reach 0.12 %. 400 points cost 12 % less a
#: point than 500 (the grid's share of the work; the rest is per element, not per point of it).
FAST_POINTS = 400
#: largest |loss balance error| (Pdc - Pload - itemised losses, relative to Pdc) of an estimate the
#: fast path keeps: a periodic solution conserves energy (Tellegen's theorem), and on a grid that
#: resolves the circuit the estimate's balance closes to 1e-8 (sims/*.toml; 1.2e-3 for the angelov
#: device's charges, solved by collocation); a hard-switched class E with Ron x C far below the time
#: step was 5.7 % off, its Pout 8.6 % below ngspice's (tests/test_closure.py). Above it the point
#: runs in ngspice.
ESTIMATE_BALANCE_MAX = 5e-3
#: a confirmed point whose Pout or drain efficiency differs from ngspice's by more than this
#: relative amount is flagged and re-run in ngspice (the issue's acceptance bound)
CONFIRM_TOL = 2e-3


def _fast_grid(design, points: int | None) -> int:
    ppc = int(design.sim.points_per_cycle)
    return int(points) if points else min(ppc, FAST_POINTS)


def turn_on_state(state) -> dict:
    """Drain voltage and its slope just before the switch turns on, from the periodic estimate.

    The grid of a switch starts half a step after its turn-on instant (netgen.periodic.device),
    so the last grid point is half a step before it. Sokal's nominal class-E conditions are
    v = 0 and dv/dt = 0 there (Sokal & Sokal, IEEE JSSC 1975).

    Returns
    -------
    dict
        ``zvs_v_over_vdd`` (v at turn-on / Vdd) and ``zvs_slope_over_vdd`` ((dv/d(omega0 t)) / Vdd),
        both None when the device is not a switch with a single turn-on (no ``t0_s``).
    """
    if not state.t0_s or "drain" not in state.series or "vdd" not in state.series:
        return {"zvs_v_over_vdd": None, "zvs_slope_over_vdd": None}
    v = state.series["drain"]
    vdd = float(np.mean(state.series["vdd"]))
    return _edge(v[-3:], 0.5, state.points, vdd)


def _edge(v3: np.ndarray, lead: float, points: int, vdd_v: float) -> dict:
    """Turn-on state from the drain voltage at three grid samples, the last ``lead`` steps before
    the instant: v extrapolated linearly to the instant, the slope by the central difference
    (per radian)."""
    v3 = np.asarray(v3, dtype=float)
    v_on = v3[2] + lead * (v3[2] - v3[1])
    slope = (v3[2] - v3[0]) / 2.0 * (points / (2.0 * math.pi))
    return {"zvs_v_over_vdd": float(v_on / vdd_v), "zvs_slope_over_vdd": float(slope / vdd_v)}


def estimate_waveforms(sized, netlist: str, points: int | None = None):
    """The periodic estimate of a rendered transient netlist as :class:`netgen.design.Waveforms`.

    Parameters
    ----------
    sized : SizedDesign
    netlist : str
        ``render(sized, mode="tran")``.
    points : int, optional
        Grid points a period (default: ``sim.points_per_cycle``, at most :data:`FAST_POINTS`).

    Returns
    -------
    (Waveforms, PeriodicState)
        One period from t = 0 (the estimate's grid rolled to the sample nearest t = 0), every
        node voltage of the network, the drain, switch and supply currents, the exact Fourier
        coefficients of the grid (the DFT, its phase referred to t = 0) and the grid's extremes.

    Raises
    ------
    netgen.netlist.Unsupported
        Where the estimate does not model the netlist.
    """
    from netgen.periodic import estimate

    design = sized.design
    state = estimate(netlist, design.f0_hz, _fast_grid(design, points))
    M, T = state.points, 1.0 / design.f0_hz
    shift = round(state.t0_s / T * M) % M  # grid index of the sample nearest t = 0 (mod T)
    start = (-shift) % M

    def rolled(x):  # np.roll(x, -start), without its generality
        x = np.asarray(x, dtype=float)
        return np.concatenate((x[start:], x[:start])) if start else x.copy()

    v = {name: rolled(x) for name, x in state.series.items() if "#" not in name}
    i = {"drain": rolled(state.series["vidrain#branch"]), "supply": -rolled(state.series["vdd#branch"])}
    if "visw#branch" in state.series:
        i["switch"] = rolled(state.series["visw#branch"])
    n_h = int(design.sim.harmonics)
    rot = np.exp(-2j * np.pi * np.arange(n_h + 1) * (state.t0_s / T))

    def coeffs(x, sign=1.0):
        c = sign * np.fft.rfft(np.asarray(x, dtype=float))[: n_h + 1] / M
        c[1:] *= 2.0
        return c * rot

    fourier = {"drain_v": coeffs(state.series["drain"]), "load_v": coeffs(state.series["load"]),
               "drain_i": coeffs(state.series["vidrain#branch"]),
               "supply_i": coeffs(state.series["vdd#branch"], -1.0)}
    gate = _gate_drive(netlist, state, T)
    if gate is not None:
        v["gate"], i["gate"] = rolled(gate[0]), rolled(gate[1])
        i["source"] = i["gate"]  # the drive source's current (as the simulator path, periodic.steady)
        if "vigate#branch" in state.series:  # behind an input network the gate's own current is VIGATE's
            i["gate"] = rolled(state.series["vigate#branch"])
    vd, idr = state.series["drain"], state.series["vidrain#branch"]
    peaks = {"vd_max_v": float(vd.max()), "vd_min_v": float(vd.min()),
             "id_max_a": float(idr.max()), "id_min_a": float(idr.min())}
    wf = Waveforms(f0_hz=design.f0_hz, t_s=np.arange(M) * (T / M), v=v, i=i, settled=True, cycles=0,
                   note=f"periodic estimate on {M} points a period (no time stepping; not an ngspice run)",
                   peaks=peaks, fourier=fourier, start={"method": "estimate"})
    return wf, state


def _gate_drive(netlist: str, state, period_s: float):
    """(gate voltage, current the drive source delivers) on the estimate's grid, or None without a gate.

    The estimate solves the network the device's drain sees; a device driven at its gate (the gm
    device: ``VDRIVE gate 0``, ``RGIN gate 0``) has its input circuit apart from it, so the gate
    waveforms are computed here: the gate voltage is the drive source's waveform, the current it
    delivers the sum of the currents into the resistors and capacitors from the gate to ground
    (``C dv/dt`` with the trapezoidal rule's ``s_k = (2/h) j tan(theta_k/2)``, as the estimate).
    Where the estimate's state already holds the gate (a gate coupled into the network) its own
    series are used. Sign as ``Waveforms.i["gate"]``: positive when the source delivers power.

    Raises
    ------
    netgen.netlist.Unsupported
        When the gate circuit is anything else (its Pin would not be the simulator's).
    """
    from netgen.netlist import GROUND, Unsupported, read_cards, source_waveform, spice_value

    if "gate" not in state.series and not re.search(r"(?im)[ \t]gate(?=[ \t]|$)", netlist):
        return None  # no card touches a gate node
    if "gate" in state.series:
        if "vdrive#branch" not in state.series:
            raise Unsupported("the gate is part of the network but its drive source current is not in the estimate")
        return state.series["gate"], -state.series["vdrive#branch"]
    drive, loads = None, []
    for c in read_cards(netlist):
        if c.text.startswith("."):
            continue
        toks = [x.lower() for x in c.tokens]
        kind = c.name[0]
        terms = toks[1:5] if kind == "T" else toks[1:-1] if kind == "X" else toks[1:3]
        if "gate" not in terms:
            continue
        other = [x for x in toks[1:3] if x != "gate"]
        if kind in "VRC" and len(terms) == 2 and other and other[0] in GROUND:
            if kind == "V":
                if drive is not None:
                    raise Unsupported("the gate has two drive sources; the estimate's gate model takes one")
                drive = (source_waveform(c.tokens, period_s), 1.0 if toks[1] == "gate" else -1.0)
            else:
                loads.append((kind, spice_value(c.tokens[3].split("=")[-1], c.name)))
            continue
        raise Unsupported(f"{c.tokens[0]}: the gate circuit is more than a drive source with resistors and "
                          "capacitors to ground, which the estimate's gate model covers")
    if drive is None:
        if loads:
            raise Unsupported("the gate node has no drive source from ground")
        return None
    M = state.points
    h = period_s / M
    grid = state.t0_s + np.arange(M) * h
    vg = drive[1] * np.asarray(drive[0].value(grid), dtype=float)
    theta = 2.0 * np.pi * np.arange(M // 2 + 1) / M
    s_k = 1j * (2.0 / h) * np.tan(np.minimum(theta / 2.0, math.pi / 2.0 * (1.0 - 1e-9)))
    ig = np.zeros(M)
    for kind, value in loads:
        if kind == "R":
            ig += vg / value
        else:
            ig += np.fft.irfft(s_k * value * np.fft.rfft(vg), M)
    return vg, ig


def evaluate_estimate(design, *, points: int | None = None) -> dict:
    """Metrics of a design from the periodic estimate alone (``"engine": "estimate"``).

    Raises ``netgen.netlist.Unsupported`` where the estimate does not apply.
    """
    from netgen.netlist import Unsupported, render
    from netgen.results import analyse
    from netgen.synthesis import size

    sized = size(design)
    netlist = render(sized, mode="tran")
    wf, state = estimate_waveforms(sized, netlist, points)
    metrics = analyse(wf, sized, netlist, engine="estimate")
    balance = metrics.get("loss_balance_error")
    if balance is not None and abs(balance) > ESTIMATE_BALANCE_MAX:
        raise Unsupported(f"its energy balance is off by {100 * balance:.2g} % of Pdc (Pdc - Pload - losses; a "
                          "switching event faster than its grid, e.g. a capacitor discharged through Ron within a "
                          "time step)")
    metrics["estimate_points"] = int(state.points)
    metrics.update(turn_on_state(state))
    return metrics


def evaluate_ngspice(design) -> dict:
    """Metrics of a design from the full ngspice run (``"engine": "ngspice"``), with the
    class-E turn-on state (from the drain waveform at the switch's turn-on) where it exists."""
    from netgen.pipeline import run_design

    res = run_design(design, None, plots=False)
    metrics = dict(res.metrics)
    metrics.update(ngspice_turn_on(res))
    return metrics


def ngspice_turn_on(res) -> dict:
    """``zvs_v_over_vdd`` and ``zvs_slope_over_vdd`` of an ngspice run (see :func:`turn_on_state`):
    the turn-on instant is the estimate's (netgen.periodic.device), the voltage ngspice's drain
    waveform just before it (linear interpolation of its uniform two-period grid)."""
    from netgen.netlist import Unsupported
    from netgen.periodic import estimate

    none = {"zvs_v_over_vdd": None, "zvs_slope_over_vdd": None}
    design = res.sized.design
    try:
        state = estimate(res.netlist, design.f0_hz, 64)
    except Unsupported:
        return none
    if not state.t0_s:
        return none
    T = 1.0 / design.f0_hz
    wf = res.waveforms
    t_on = state.t0_s - 0.5 * T / state.points + T  # inside the second period of the grid
    h = float(wf.t_s[1] - wf.t_s[0])
    vd = np.asarray(wf.v["drain"], dtype=float)
    k = math.floor(t_on / h - 1e-9)  # the last sample before the instant (the run's own grid)
    return _edge(vd[k - 2:k + 1], t_on / h - k, round(T / h), float(design.vdd_v))


def evaluate_fast(design) -> dict:
    """Metrics from the estimate, or from ngspice where the estimate does not apply (then
    ``engine_note`` says why). A module-level function: studies pickle it to their workers."""
    from netgen.netlist import Unsupported

    try:
        return evaluate_estimate(design)
    except Unsupported as exc:
        metrics = evaluate_ngspice(design)
        metrics["engine_note"] = f"the periodic estimate does not apply ({exc}); ran in ngspice"
        return metrics


def fallback_reason(engine_note: str | None) -> str:
    """Why a point ran in ngspice, from its ``engine_note`` (written by :func:`evaluate_fast`)
    without the trailing "; ran in ngspice"."""
    return (engine_note or "the periodic estimate does not apply").split(";")[0]


def disagreement(fast: dict, full: dict) -> dict:
    """Relative difference of Pout and drain efficiency, estimate against ngspice.

    Returns
    -------
    dict
        ``pout_rel``, ``efficiency_rel`` (fast/full - 1), ``worst`` (largest magnitude, None when
        a value is missing) and ``flagged`` (``worst`` > :data:`CONFIRM_TOL` or missing).
    """
    out = {}
    for key, name in (("pout_w", "pout_rel"), ("drain_efficiency", "efficiency_rel")):
        a, b = fast.get(key), full.get(key)
        out[name] = (a / b - 1.0) if a is not None and b else None
    vals = [abs(x) for x in out.values() if x is not None]
    out["worst"] = max(vals) if len(vals) == 2 else None
    out["flagged"] = out["worst"] is None or out["worst"] > CONFIRM_TOL
    return out


def confirm_points(store, sweep_id: int, base_doc: dict, indices, *, progress=None) -> list[dict]:
    """Re-run stored estimate points in ngspice and record the disagreement.

    For each index: the stored point's design is rebuilt from the plan's base document
    (``SweepPlan.base_doc``, the network pinned as the sweep ran it) and the point's stored inputs
    (keys set, component values written), run in ngspice, and
    the difference (:func:`disagreement`) kept under ``metrics["confirmation"]``. A flagged
    point's stored metrics become ngspice's (the estimate's Pout and efficiency kept beside
    them); a point that already ran in ngspice (the estimate did not apply) is skipped.

    Returns
    -------
    list of dict
        ``idx``, ``pout_rel``, ``efficiency_rel``, ``worst``, ``flagged``, ``seconds`` (or ``error``).
    """
    from netgen.design import design_from_dict

    wanted = {int(i) for i in indices}
    rows = [r for r in store.rows(sweep_id) if r["idx"] in wanted]
    out = []
    for row in rows:
        m = row["metrics"]
        if row["status"] == "failed" or not m or m.get("engine") != "estimate":
            continue
        t0 = time.perf_counter()
        doc = _point_doc(base_doc, row["inputs"])
        try:
            design = design_from_dict(doc, source=None, where=f"sweep point {row['idx']}")
            full = evaluate_ngspice(design)
        except Exception as exc:  # noqa: BLE001 - a confirmation failing is reported, never fatal
            out.append({"idx": row["idx"], "error": f"{type(exc).__name__}: {exc}"})
            continue
        d = disagreement(m, full)
        d.update(idx=row["idx"], seconds=time.perf_counter() - t0,
                 ngspice_pout_w=full.get("pout_w"), ngspice_drain_efficiency=full.get("drain_efficiency"))
        store_confirmed(store, sweep_id, row, dict(full) if d["flagged"] else dict(m), d, m)
        out.append(d)
        if progress is not None:
            progress(d)
    return out


def _point_doc(base_doc: dict, inputs: dict) -> dict:
    """The design document of a stored point: the keys it set and the component values it wrote."""
    from netgen.design import set_dotted

    doc = base_doc
    for path, value in (inputs.get("set") or {}).items():
        doc = set_dotted(doc, path, value)
    for name, value in (inputs.get("values") or {}).items():
        doc = set_dotted(doc, f"network.values.{name}", value)
    return doc


def store_confirmed(store, sweep_id: int, row: dict, kept: dict, d: dict, estimate: dict) -> None:
    """Store a confirmed point: ``kept`` (the estimate's metrics, or ngspice's where flagged) with
    its ``confirmation`` record (the disagreement ``d`` and the estimate's own Pout and efficiency)."""
    kept["confirmation"] = {**d, "estimate_pout_w": estimate.get("pout_w"),
                            "estimate_drain_efficiency": estimate.get("drain_efficiency"),
                            "replaced_by_ngspice": bool(d["flagged"])}
    from .execute import plain_json

    # the point's record is replaced (the store keeps the first record of a point otherwise)
    metrics = plain_json(kept)
    store.con.execute("DELETE FROM points WHERE sweep_id = ? AND idx = ?", (sweep_id, row["idx"]))
    status = "ok" if metrics.get("settled") else "not_settled"
    store.record(sweep_id, row["idx"], row["inputs"], status, metrics, None, row["seconds"] or 0.0)


def confirm_sample(store, sweep_id: int, base_doc: dict, n: int, *, seed: int = 1, include=(),
                   progress=None) -> dict:
    """Confirm ``n`` stored estimate points drawn at random (``numpy.random.default_rng(seed)``),
    plus the indices in ``include`` (e.g. the final point), in ngspice (:func:`confirm_points`).

    Returns
    -------
    dict
        ``points`` (the per-point results), ``confirmed``, ``flagged`` (count), ``worst_pout_rel``,
        ``worst_efficiency_rel`` (largest magnitudes), ``tolerance`` (:data:`CONFIRM_TOL`).
    """
    eligible = [r["idx"] for r in store.rows(sweep_id)
                if r["status"] != "failed" and (r["metrics"] or {}).get("engine") == "estimate"
                and "confirmation" not in (r["metrics"] or {})]
    rng = np.random.default_rng(int(seed))
    k = min(max(int(n), 0), len(eligible))
    chosen = {int(i) for i in rng.choice(eligible, size=k, replace=False)} if k else set()
    chosen |= {int(i) for i in include if i in eligible}
    results = confirm_points(store, sweep_id, base_doc, sorted(chosen), progress=progress)
    return summarize_confirmation(results)


def summarize_confirmation(results: list[dict]) -> dict:
    """Counts and the largest disagreements of :func:`confirm_points` results."""
    ok = [r for r in results if "error" not in r]

    def worst(key):
        vals = [abs(r[key]) for r in ok if r.get(key) is not None]
        return max(vals) if vals else None

    return {"points": results, "confirmed": len(ok), "errors": len(results) - len(ok),
            "flagged": sum(bool(r["flagged"]) for r in ok), "worst_pout_rel": worst("pout_rel"),
            "worst_efficiency_rel": worst("efficiency_rel"), "tolerance": CONFIRM_TOL}
